// Non-centered hierarchical model with location and scale in a transformed
// parameter (Betancourt & Girolami 2015). Scenario (invented): reading times of
// pupils in six schools of the Harrowlee district.
data {
  int<lower=1> J;
  array[J] real score;
  array[J] real<lower=0> sd_score;
}
parameters {
  real mu;
  real<lower=0> tau;
  vector[J] eta;
  vector<offset=mu, multiplier=tau>[J] theta_affine;
}
transformed parameters {
  vector[J] theta = mu + tau * eta;
}
model {
  mu ~ normal(0, 5);
  tau ~ normal(0, 5);
  eta ~ std_normal();
  theta_affine ~ normal(mu, tau);
  score ~ normal(theta, sd_score);
}
