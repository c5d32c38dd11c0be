// Invented scenario: effect of a tasting event on sales at four fictional bakeries.
data {
  int<lower=1> J;
  vector[J] uplift;
  vector<lower=0>[J] se;
}
parameters {
  real mu;
  real<lower=0> tau;
  vector[J] theta;
}
model {
  mu ~ normal(0, 5);
  tau ~ normal(0, 5);
  theta ~ normal(mu, tau);                     // expect: model.centered-hierarchy
  uplift ~ normal(theta, se);
}
