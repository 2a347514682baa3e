/* report: to be written. */
