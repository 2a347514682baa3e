/* special: to be written. */
