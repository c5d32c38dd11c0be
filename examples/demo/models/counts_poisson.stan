// Varroa mites dropped onto one sticky board in one week, against colony strength.
data {
  int<lower=0> N;                    // boards
  vector[N] strength;                // frames covered by bees, standardized
  array[N] int<lower=0> y;           // mites counted on the board
  int<lower=0, upper=1> prior_only;  // 1: leave the likelihood out
}
parameters {
  real alpha;
  real beta;
}
model {
  alpha ~ normal(2, 1);
  beta ~ normal(0, 0.5);
  if (!prior_only) {
    y ~ poisson_log(alpha + beta * strength);
  }
}
generated quantities {
  vector[N] log_lik;
  array[N] int y_rep;
  for (n in 1:N) {
    real eta = alpha + beta * strength[n];
    log_lik[n] = poisson_log_lpmf(y[n] | eta);
    y_rep[n] = poisson_log_rng(eta);
  }
}
