// Truncated distributions (Reference Manual, "Truncated distributions"):
// T[a, b], T[, b] and T[a, ]. Scenario (invented): parcel weights at the
// Marrowgate sorting hall, where the scale reads between 0.1 and 30 kg.
data {
  int<lower=0> N;
  array[N] real<lower=0.1, upper=30> w;
  real<lower=0> cap;
}
parameters {
  real<lower=0> mu;
  real<lower=0> sigma;
  real<lower=0> nu;
}
model {
  mu ~ normal(5, 3) T[0, ];
  sigma ~ cauchy(0, 2) T[, 10];
  nu ~ gamma(2, 0.1) T[1, 50];
  for (n in 1:N)
    w[n] ~ normal(mu, sigma) T[0.1, cap];
}
