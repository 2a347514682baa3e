/* dist: to be written. */
