data {
  int<lower=1> N;
  int<lower=1> J;
  array[N] int<lower=1, upper=J> roof;
  vector[N] y;
  real<lower=0> sigma;
}
parameters {
  real mu;
  real<lower=0> tau;
  vector<offset=mu, multiplier=tau>[J] theta;
}
model {
  mu ~ normal(0, 5);
  tau ~ normal(0, 2);
  theta ~ normal(mu, tau);
  y ~ normal(theta[roof], sigma);
}
