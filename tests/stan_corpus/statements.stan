// Statements of the Stan Reference Manual, chapter "Statements". Scenario (invented):
// ferry crossings counted at the Quillby landing.
data {
  int<lower=0> N;
  array[N] int<lower=0> crossings;
  vector[N] wind;
}
transformed data {
  int total = 0;
  for (n in 1:N) {
    total += crossings[n];
  }
  real windiest = negative_infinity();
  for (w in wind) {
    if (w > windiest) windiest = w;
  }
  int k = 0;
  while (k < N) {
    k += 1;
    if (k > 100) break;
    else if (k % 2 == 0) continue;
  }
  print("total crossings: ", total, " windiest: ", windiest);
  if (total < 0) reject("negative total ", total);
  if (N > 1000000) fatal_error("too many days: ", N);
}
parameters {
  real alpha;
  real beta;
}
model {
  vector[N] log_rate;
  profile("linear predictor") {
    log_rate = alpha + beta * wind;
  }
  {
    real shrink = 2;
    alpha ~ normal(0, shrink);
  }
  beta ~ normal(0, 1);
  crossings ~ poisson_log(log_rate);
  ;
}
generated quantities {
  array[N] int sim;
  for (n in 1:N) {
    sim[n] = poisson_log_rng(alpha + beta * wind[n]);
  }
  vector[N] scaled = wind;
  scaled *= 2;
  scaled /= 3;
  scaled -= 1;
  scaled .*= wind;
  scaled ./= wind;
}
