// Invented scenario: drying time of paint samples on four fictional test boards.
// The program was edited after the fit: sigma added, board resized, phi removed.
data {
  int<lower=1> J;
  vector[J] hours;
}
parameters {
  real mu;
  real<lower=0> sigma;                         // expect: inputs.stale-fit
  vector[J] board;                             // expect: inputs.stale-fit
}
model {
  mu ~ normal(5, 2);
  sigma ~ normal(0, 1);
  board ~ normal(0, 1);
  hours ~ normal(mu + board, sigma);
}
