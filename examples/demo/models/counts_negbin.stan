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
  real<lower=0> phi;                 // negative-binomial shape
}
model {
  alpha ~ normal(2, 1);
  beta ~ normal(0, 0.5);
  phi ~ lognormal(1, 0.75);
  if (!prior_only) {
    y ~ neg_binomial_2_log(alpha + beta * strength, phi);
  }
}
generated quantities {
  vector[N] log_lik;
  array[N] int y_rep;
  for (n in 1:N) {
    real eta = alpha + beta * strength[n];
    log_lik[n] = neg_binomial_2_log_lpmf(y[n] | eta, phi);
    y_rep[n] = neg_binomial_2_log_rng(eta, phi);
  }
}
