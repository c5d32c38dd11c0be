// Deliberate error: the semicolon after the declaration of N is missing.
data {
  int<lower=0> N
  vector[N] y;
}
