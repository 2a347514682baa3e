/* rng: to be written. */
