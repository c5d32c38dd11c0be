parameters {
  real alpha  // expect: inputs.model-syntax
}
model {
  alpha ~ normal(0, 1);
}
