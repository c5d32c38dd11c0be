// The functions block (Reference Manual, "User-Defined Functions"): forward
// declarations, void functions, data-only arguments, _rng, _lp, _lpdf, _lpmf.
// Scenario (invented): hive weights at the Brambleford apiary.
functions {
  real scaled_mean(vector x, real s);
  real scaled_mean(vector x, real s) {
    return mean(x) / s;
  }
  void check_positive(data real x) {
    if (x <= 0) reject("x must be positive, got ", x);
  }
  real hive_lpdf(real y, real mu, real sigma) {
    return normal_lpdf(y | mu, sigma);
  }
  real count_lpmf(int n, real lambda) {
    return poisson_lpmf(n | lambda);
  }
  real hive_rng(real mu, real sigma) {
    return normal_rng(mu, sigma);
  }
  void shrink_lp(vector z, real tau) {
    z ~ normal(0, tau);
    target += -0.5 * tau;
  }
  array[] real doubled(array[] real xs) {
    array[size(xs)] real out;
    for (i in 1:size(xs)) out[i] = 2 * xs[i];
    return out;
  }
  matrix outer_self(data vector v) {
    return v * v';
  }
  array[,] real grid(int n) {
    array[n, n] real g;
    for (i in 1:n) for (j in 1:n) g[i, j] = i * j;
    return g;
  }
  tuple(real, int) pair(real x) {
    return (x, 1);
  }
  complex_vector twist(complex_vector z) {
    return z;
  }
}
data {
  int<lower=1> N;
  vector<lower=0>[N] weight;
  array[N] int<lower=0> visits;
}
transformed data {
  check_positive(scaled_mean(weight, 1.0));
}
parameters {
  real mu;
  real<lower=0> sigma;
  real<lower=0> lambda;
  vector[3] z;
}
model {
  shrink_lp(z, 1.0);
  mu ~ normal(20, 5);
  sigma ~ normal(0, 2);
  lambda ~ gamma(2, 0.5);
  for (n in 1:N) {
    weight[n] ~ hive(mu, sigma);
    target += count_lpmf(visits[n] | lambda);
    target += count_lupmf(visits[n] | lambda);
  }
}
generated quantities {
  real w_new = hive_rng(mu, sigma);
}
