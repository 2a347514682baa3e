/* sampler: to be written. */
