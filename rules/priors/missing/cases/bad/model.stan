// Invented scenario: daily output of small wind turbines against wind speed.
data {
  int<lower=1> N;
  vector[N] wind;
  vector[N] output;
}
parameters {
  real alpha;                                  // expect: priors.missing
  real beta;
  real<lower=0, upper=1> loss;                 // expect: priors.missing
  real<offset=0, multiplier=5> gamma;          // expect: priors.missing
  real<lower=0> sigma;
}
model {
  beta ~ normal(0, 2);
  sigma ~ exponential(1);
  output ~ normal(alpha + beta * wind * (1 - loss) + gamma, sigma);
}
