// Weight change of a hive over one week (kg), hives grouped by yard.
data {
  int<lower=1> N;                          // hives
  int<lower=1> J;                          // yards
  array[N] int<lower=1, upper=J> yard;
  vector[N] y;                             // weight change, kg
  real<lower=0> sigma;                     // hive-to-hive spread within a yard, from past seasons
  int<lower=0, upper=1> prior_only;        // 1: leave the likelihood out
}
parameters {
  real mu;
  real<lower=0> tau;
  vector[J] z;
}
transformed parameters {
  vector[J] theta = mu + tau * z;          // yard means
}
model {
  mu ~ normal(0, 5);
  tau ~ normal(0, 5);
  z ~ std_normal();
  if (!prior_only) {
    y ~ normal(theta[yard], sigma);
  }
}
generated quantities {
  vector[N] log_lik;
  vector[N] y_rep;
  for (n in 1:N) {
    log_lik[n] = normal_lpdf(y[n] | theta[yard[n]], sigma);
    y_rep[n] = normal_rng(theta[yard[n]], sigma);
  }
}
