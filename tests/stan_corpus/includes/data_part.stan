  int<lower=0> N;
  vector[N] flow;
