// Invented scenario: daily output of small wind turbines against wind speed.
data {
  int<lower=1> N;
  vector[N] wind;
  vector[N] output;
}
parameters {
  real alpha;
  real beta;
  real<lower=0, upper=1> loss;
  real<offset=0, multiplier=5> gamma;
  real<lower=0> sigma;
}
model {
  alpha ~ normal(0, 2);
  beta ~ normal(0, 2);
  loss ~ beta(2, 8);
  target += normal_lpdf(gamma | 0, 5);
  sigma ~ exponential(1);
  output ~ normal(alpha + beta * wind * (1 - loss) + gamma, sigma);
}
