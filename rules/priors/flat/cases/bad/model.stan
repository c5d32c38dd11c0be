// Invented scenario: waiting times at the counters of a fictional post office.
data {
  int<lower=1> N;
  vector<lower=0>[N] wait;
}
parameters {
  real<lower=0, upper=1000> mu;
  real<lower=0, upper=50> sigma;
}
model {
  mu ~ uniform(0, 1000);                      // expect: priors.flat
  sigma ~ uniform(0, 50);
  wait ~ normal(mu, sigma);
}
