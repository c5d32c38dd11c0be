// Invented scenario: germination of seed batches in a fictional nursery.
data {
  int<lower=1> N;
  array[N] int<lower=0> sprouted;
  array[N] int<lower=1> sown;
  vector[N] warmth;
  real L;
}
parameters {
  real<lower=0, upper=100> sigma;
  real<lower=0> slope;
  real<lower=0, upper=1> base;
  real<lower=L> extra;
  real<lower=0> tau;
  vector[N] eps;
}
model {
  sigma ~ uniform(0, 100);
  slope ~ gamma(2, 2);
  base ~ beta(2, 2);
  extra ~ exponential(1);
  tau ~ normal(0, 1);
  eps ~ normal(0, sigma * tau);
  sprouted ~ binomial_logit(sown, logit(base) + slope * warmth + eps + extra);
}
