// Invented scenario: drying time of paint samples on four fictional test boards.
data {
  int<lower=1> J;
  vector[J] hours;
}
parameters {
  real mu;
  real<lower=0> sigma;
  vector[J] board;
}
transformed parameters {
  vector[J] fitted = mu + board;
}
model {
  mu ~ normal(5, 2);
  sigma ~ normal(0, 1);
  board ~ normal(0, 1);
  hours ~ normal(fitted, sigma);
}
generated quantities {
  vector[J] log_lik;
  array[J] real y_rep = normal_rng(fitted, sigma);
  for (j in 1:J) log_lik[j] = normal_lpdf(hours[j] | fitted[j], sigma);
}
