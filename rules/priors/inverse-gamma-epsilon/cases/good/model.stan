// Invented scenario: hit rates of six fictional bowling teams, weakly informative priors.
data {
  int<lower=1> J;
  vector[J] score;
  vector<lower=0>[J] se;
}
parameters {
  real mu;
  real<lower=0> tau2;
  real<lower=0> prec;
  vector[J] theta;
}
transformed parameters {
  real<lower=0> tau = sqrt(tau2);
}
model {
  mu ~ normal(0, 5);
  tau2 ~ inv_gamma(3, 2);
  prec ~ gamma(2, 2);
  theta ~ normal(mu, tau);
  score ~ normal(theta, se / sqrt(prec));
}
