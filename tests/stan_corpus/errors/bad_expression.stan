// Deliberate error: an empty second argument.
parameters {
  real mu;
}
model {
  mu ~ normal(0, );
}
