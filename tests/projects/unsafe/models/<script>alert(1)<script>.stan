// <script>alert("comment")</script> <img src="file:///etc/passwd">
data {
  int<lower=0> N;
  vector[N] y;
}
parameters {
  real alpha;
  real beta; // <img src="file:///etc/passwd"> [click](javascript:alert(1)) <script>alert(2)</script>
}
model {
  alpha ~ normal(0, 1);
  y ~ normal(alpha + beta, 1);
}
