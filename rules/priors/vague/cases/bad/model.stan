// Invented scenario: melon weight (kg) against days of growth in a fictional greenhouse.
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
  alpha ~ normal(0, 1000);                     // expect: priors.vague
  beta ~ normal(0, 1000);                      // expect: priors.vague
  sigma ~ normal(0, 1);
  weight ~ normal(alpha + beta * days, sigma);
}
