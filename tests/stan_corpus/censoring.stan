// Right-censored lifetimes (Stan User's Guide, "Censored data"; the _lccdf
// functions in the Reference Manual, "Log probability increment"). Scenario
// (invented): lamp filaments tested at the Corvane workshop until hour U.
data {
  int<lower=0> N_obs;
  int<lower=0> N_cens;
  vector<lower=0>[N_obs] hours;
  real<lower=0> U;
}
parameters {
  real mu;
  real<lower=0> sigma;
}
model {
  mu ~ normal(6, 2);
  sigma ~ normal(0, 1);
  hours ~ lognormal(mu, sigma);
  target += N_cens * lognormal_lccdf(U | mu, sigma);
}
