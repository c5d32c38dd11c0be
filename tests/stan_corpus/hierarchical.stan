// Centered hierarchical model. Scenario (invented): mean pear yield per tree in
// the orchards of eight villages of the Fennick valley, with known standard errors.
data {
  int<lower=1> J;
  vector[J] yield;
  vector<lower=0>[J] se;
}
parameters {
  real mu;
  real<lower=0> tau;
  vector[J] theta;
}
model {
  mu ~ normal(0, 1000);
  tau ~ cauchy(0, 5);
  theta ~ normal(mu, tau);
  yield ~ normal(theta, se);
}
