/* expr: to be written. */
