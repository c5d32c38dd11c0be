// Nest boxes occupied per transect (invented scenario).
data {
  int<lower=0> N;
  array[N] int<lower=0> y;
}
parameters {
  real alpha;
}
model {
  alpha ~ normal(1, 1);
  y ~ poisson_log(alpha);
}
generated quantities {
  vector[N] log_lik;
  array[N] int y_rep;
  for (n in 1:N) {
    log_lik[n] = poisson_log_lpmf(y[n] | alpha);
    y_rep[n] = poisson_log_rng(alpha);
  }
}
