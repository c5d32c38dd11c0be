// Regression with priors in several spellings and a likelihood that reaches its
// predictors through a transformed parameter and a local variable. Scenario
// (invented): loaf weights from the Ashcombe bakery's two ovens.
data {
  int<lower=0> N;
  vector[N] dough;
  vector[N] heat;
  array[N] int<lower=1, upper=2> oven;
  vector[N] loaf;
}
parameters {
  real alpha;
  vector[2] beta;
  real<lower=0> sigma2;
  real gamma_heat;
}
transformed parameters {
  real<lower=0> sigma = sqrt(sigma2);
  vector[N] mu_dough = alpha + beta[oven] .* dough;
}
model {
  vector[N] mu = mu_dough + gamma_heat * heat;
  target += normal_lpdf(alpha | 0, 100);
  for (k in 1:2)
    beta[k] ~ normal(0, 1e3);
  sigma2 ~ inv_gamma(0.001, 0.001);
  target += normal_lupdf(gamma_heat | -1, 2.5);
  loaf ~ normal(mu, sigma);
}
