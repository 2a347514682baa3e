/* extract: to be written. */
