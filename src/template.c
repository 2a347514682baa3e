/* template: to be written. */
