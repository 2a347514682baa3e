/* study: to be written. */
