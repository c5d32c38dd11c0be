// Invented scenario: waiting times at the counters of a fictional post office.
data {
  int<lower=1> N;
  vector<lower=0>[N] wait;
}
parameters {
  real<lower=0, upper=60> mu;
  real<lower=0> sigma;
}
model {
  mu ~ uniform(0, 60);
  sigma ~ normal(0, 5);
  wait ~ normal(mu, sigma);
}
