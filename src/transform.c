/* transform: to be written. */
