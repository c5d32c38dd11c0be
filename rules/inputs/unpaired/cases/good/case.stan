parameters {
  real alpha;
}
model {
  alpha ~ normal(0, 1);
}
