// Included by include_with_error.stan; its third line has a stray operator.
  real x = 1;
  x = x + * 2;
