// Tuple types and expressions (Reference Manual, "Tuples"). Scenario (invented):
// paired rain and hail gauges on Tallow Ridge.
data {
  int<lower=0> N;
  tuple(real, int) gauge;
  array[N] tuple(real, array[2] int) readings;
  tuple(vector[N], tuple(real, real)) nested;
}
transformed data {
  real first = gauge.1;
  int second = gauge.2;
  real deep = nested.2.1;
  tuple(real, int) copy = (first, second);
}
parameters {
  real<lower=0> rate;
}
model {
  rate ~ exponential(1);
  gauge.2 ~ poisson(rate);
}
