/* method_mc: to be written. */
