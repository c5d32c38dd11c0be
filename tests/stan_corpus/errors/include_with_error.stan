// Deliberate error inside an included file: line 3 of includes/broken_part.stan.
parameters {
  real sigma;
}
model {
#include includes/broken_part.stan
  sigma ~ normal(0, 1);
}
