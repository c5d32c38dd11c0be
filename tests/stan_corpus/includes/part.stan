// Included into include_main.stan: the priors of the Pellin brook gauges.
  mu ~ normal(0, 5);
  sigma ~ exponential(1);
