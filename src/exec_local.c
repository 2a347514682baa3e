/* exec_local: to be written. */
