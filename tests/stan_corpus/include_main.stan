// #include expansion (Reference Manual, "Includes"). Scenario (invented): stream
// flow at the Pellin brook gauges.
data {
#include includes/data_part.stan
}
parameters {
  real mu;
  real<lower=0> sigma;
}
model {
#include "includes/part.stan"
  flow ~ normal(mu, sigma);
}
