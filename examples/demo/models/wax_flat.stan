// Beeswax rendered per hive over the season (hundreds of grams), against forage distance.
data {
  int<lower=0> N;                    // hives
  vector[N] distance;                // distance to the main forage, standardized
  vector[N] y;                       // wax, hundreds of grams
  int<lower=0, upper=1> prior_only;  // 1: leave the likelihood out
}
parameters {
  real alpha;
  real beta;
  real<lower=0> sigma;
}
model {
  alpha ~ normal(5, 2);
  sigma ~ exponential(1);
  if (!prior_only) {
    y ~ normal(alpha + beta * distance, sigma);
  }
}
generated quantities {
  vector[N] log_lik;
  vector[N] y_rep;
  for (n in 1:N) {
    log_lik[n] = normal_lpdf(y[n] | alpha + beta * distance[n], sigma);
    y_rep[n] = normal_rng(alpha + beta * distance[n], sigma);
  }
}
