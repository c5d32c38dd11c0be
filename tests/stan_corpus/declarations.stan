// Every declaration form of the Stan Reference Manual, chapter "Data Types and
// Declarations". Scenario (invented): soil probes in the hill farms of Varrowmere.
data {
  int<lower=1> N;                       // number of probe readings
  int<lower=0, upper=N> K;
  array[N] real<lower=-40, upper=60> temperature;
  vector<lower=0>[N] moisture;
  row_vector[3] weights;
  matrix<lower=0, upper=1>[N, 3] shares;
  complex z0;
  complex_vector[3] zv;
  complex_row_vector[3] zr;
  complex_matrix[2, 2] zm;
  array[N, 2] int<lower=0> counts;
  real<lower=1e-3> tiny;
  real<upper=-1.5> negative_cap;
  real<lower=0> width, height;            // several variables of one type
}
transformed data {
  real<lower=0> mean_moisture = mean(moisture);
  int half_n = N %/% 2;
}
parameters {
  real<offset=10, multiplier=2.5> level;
  real<multiplier=3> spread_raw;
  simplex[3] mix;
  ordered[2] cutpoints;
  positive_ordered[2] rates;
  unit_vector[3] direction;
  cholesky_factor_corr[3] L_corr;
  cholesky_factor_cov[3] L_cov;
  cholesky_factor_cov[4, 3] L_rect;
  corr_matrix[3] Omega;
  cov_matrix[3] Sigma;
  sum_to_zero_vector[4] effects;
  real<lower=0> sigma;
  vector<lower=-1, upper=1>[N] rho;
  array[2] vector<lower=0>[3] scales;
}
transformed parameters {
  real spread = spread_raw * sigma;
  real low = level - 1, high = level + 1;
}
model {
  level ~ normal(10, 2.5);
  sigma ~ exponential(1);
  log(spread_raw + 10) ~ normal(2, 1);
}
