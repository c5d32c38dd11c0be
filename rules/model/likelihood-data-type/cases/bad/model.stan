// Invented scenario: a survey of fictional beehives.
data {
  int<lower=1> N;
  array[N] int visits;
  array[N] int queenless;
  vector[N] wax_kg;
  vector[N] brood_share;
}
parameters {
  real mu_v;
  real<lower=0> s_v;
  real mu_q;
  real<lower=0> s_q;
  real mu_w;
  real<lower=0> s_w;
  real mu_b;
  real<lower=0> s_b;
}
model {
  mu_v ~ normal(0, 10);
  s_v ~ normal(0, 10);
  mu_q ~ normal(0, 1);
  s_q ~ normal(0, 1);
  mu_w ~ normal(0, 1);
  s_w ~ normal(0, 1);
  mu_b ~ normal(0, 1);
  s_b ~ normal(0, 1);
  visits ~ normal(mu_v, s_v);                  // expect: model.likelihood-data-type
  queenless ~ normal(mu_q, s_q);               // expect: model.likelihood-data-type
  wax_kg ~ normal(mu_w, s_w);                  // expect: model.likelihood-data-type
  brood_share ~ normal(mu_b, s_b);             // expect: model.likelihood-data-type
}
