/* records: to be written. */
