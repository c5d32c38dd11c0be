// Invented scenario: a survey of fictional beehives, with likelihoods matched to the data.
data {
  int<lower=1> N;
  array[N] int<lower=0> visits;
  array[N] int<lower=0, upper=1> queenless;
  vector<lower=0>[N] hive_temp;
  vector<lower=0, upper=1>[N] brood_share;
  vector[N] weight_change;
}
parameters {
  real log_rate;
  real logit_q;
  real mu_t;
  real<lower=0> s_t;
  real<lower=0> a_b;
  real<lower=0> b_b;
  real mu_c;
  real<lower=0> s_c;
}
model {
  log_rate ~ normal(1, 1);
  logit_q ~ normal(0, 1.5);
  mu_t ~ normal(35, 3);
  s_t ~ normal(0, 2);
  a_b ~ gamma(2, 0.5);
  b_b ~ gamma(2, 0.5);
  mu_c ~ normal(0, 1);
  s_c ~ normal(0, 1);
  visits ~ poisson_log(log_rate);
  queenless ~ bernoulli_logit(logit_q);
  hive_temp ~ normal(mu_t, s_t);
  brood_share ~ beta(a_b, b_b);
  weight_change ~ normal(mu_c, s_c);
}
