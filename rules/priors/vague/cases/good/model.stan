// Invented scenario: melon weight (grams) against days of growth in a fictional greenhouse.
// The priors look wide in absolute terms but match the data's units.
data {
  int<lower=1> N;
  vector[N] days;
  vector[N] weight;
}
parameters {
  real alpha;
  real beta;
  real<lower=0> sigma;
}
model {
  alpha ~ normal(0, 5000);
  beta ~ normal(0, 500);
  sigma ~ normal(0, 1000);
  weight ~ normal(alpha + beta * days, sigma);
}
