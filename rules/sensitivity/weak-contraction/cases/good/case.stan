// Stream temperature readings at one gauge (invented scenario).
data {
  int<lower=0> N;
  vector[N] y;
}
parameters {
  real mu;
}
model {
  mu ~ normal(0, 5);
  y ~ normal(mu, 1);
}
generated quantities {
  vector[N] log_lik;
  array[N] real y_rep;
  for (n in 1:N) {
    log_lik[n] = normal_lpdf(y[n] | mu, 1);
    y_rep[n] = normal_rng(mu, 1);
  }
}
