parameters {
  real mu;
}
model {
  mu + 1 = 2;
  mu ~ normal(0, 1);
}
