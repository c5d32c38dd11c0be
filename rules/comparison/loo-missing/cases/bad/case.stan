// Stream temperature readings at one gauge (invented scenario).
data {
  int<lower=0> N;
  vector[N] y;
}
parameters {
  real mu;
}
model {
  mu ~ normal(0, 5);
  y ~ normal(mu, 1);  // expect: comparison.loo-missing
}
generated quantities {
  
  array[N] real y_rep;
  for (n in 1:N) {
    
    y_rep[n] = normal_rng(mu, 1);
  }
}
