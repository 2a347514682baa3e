/* estimate: to be written. */
