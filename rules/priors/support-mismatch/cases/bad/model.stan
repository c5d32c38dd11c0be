// Invented scenario: germination of seed batches in a fictional nursery.
data {
  int<lower=1> N;
  array[N] int<lower=0> sprouted;
  array[N] int<lower=1> sown;
  vector[N] warmth;
}
parameters {
  real<lower=0> sigma;
  real slope;
  real<lower=0> base;
  vector[N] eps;
}
model {
  sigma ~ uniform(0, 100);                     // expect: priors.support-mismatch
  slope ~ gamma(2, 2);                         // expect: priors.support-mismatch
  base ~ beta(2, 2);                           // expect: priors.support-mismatch
  eps ~ normal(0, sigma);
  sprouted ~ binomial_logit(sown, logit(base) + slope * warmth + eps);
}
