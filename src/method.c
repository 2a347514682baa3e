/* method: to be written. */
