data {
  int N;
}
parameters {
  real mu @ 2;
}
