/* sobol_table: to be written. */
