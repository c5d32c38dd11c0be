# Pre-2.33 syntax still met in old projects: `real x[N]` arrays, `<-`
# assignment, `#` comments, `increment_log_prob`, `real[]` argument types.
# Scenario (invented): tide marks at the Grisholm pier.
functions {
  real total(real[] xs) {
    return sum(xs);
  }
}
data {
  int<lower=0> N;
  real height[N];
  int<lower=0> flags[N, 2];
  vector<lower=0>[2] arms[N];
}
transformed data {
  real s;
  s <- total(height);
}
parameters {
  real mu;
  real<lower=0> sigma;
  real offsets[N];
}
model {
  mu ~ normal(0, 10);   # a comment in the old style
  sigma ~ cauchy(0, 5);
  offsets ~ normal(0, 1);
  height ~ normal(mu, sigma);
  increment_log_prob(-0.5 * square(mu));
}
