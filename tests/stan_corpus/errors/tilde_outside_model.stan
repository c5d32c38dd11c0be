// Deliberate error: a distribution statement in generated quantities.
parameters {
  real mu;
}
generated quantities {
  mu ~ normal(0, 1);
}
