/* Expressions of the Stan Reference Manual, chapter "Expressions": literals,
   operator precedence, indexing and slicing, conditional notation, container
   literals. Scenario (invented): lantern brightness in the Ostrel tunnels. */
data {
  int<lower=1> N;
  int<lower=1> M;
  matrix[N, M] X;
  vector[N] y;
  array[N] int<lower=1, upper=M> group;
}
transformed data {
  real a = 1.5e2;
  real b = .25;
  real c = 3.;
  real d = 2E-3;
  complex zi = 2.5i;
  complex zj = 3i;
  real e = -2 ^ 2;            // unary minus binds looser than ^: -(2^2)
  real f = 2 ^ 3 ^ 2;          // ^ is right associative
  int g = 7 %/% 2 % 3;
  int h = !(N > 1) || (M >= 2 && N != 3) || N == 4 || N <= 5;
  real t = N > 2 ? 1.0 : 0.0;
  vector[M] ones = rep_vector(1, M);
  row_vector[3] rv = [1, 2, 3];
  matrix[2, 2] m2 = [[1, 2], [3, 4]];
  array[3] int arr = {1, 2, 3};
  array[2, 2] real nested = {{1.0, 2.0}, {3.0, 4.0}};
  matrix[M, N] Xt = X';
  vector[N] proj = X * ones;
  vector[N] elt = proj .* proj ./ (proj + 1);
  vector[M] solved = m2[1:2, 1:2] \ ones[1:2] + rep_vector(0, M)[1:2];
  matrix[N, 2] first_cols = X[:, 1:2];
  matrix[2, M] last_rows = X[(N - 1):, ];
  vector[N] col = X[, 1];
  row_vector[M] row1 = X[1];
  real corner = X[N, M];
  array[2] int multi = arr[{1, 3}];
  real tr = (rv * rv')';
  real elpow = sum(ones .^ 2);
  real lp_sum = normal_lpdf(y | 0, 1) + normal_lupdf(y | 0, 1) + normal_lcdf(0 | 0, 1)
                - normal_lccdf(0 | 0, 1) + std_normal_lpdf(y |);
}
parameters {
  vector[M] beta;
  real<lower=0> sigma;
}
model {
  beta ~ std_normal();
  sigma ~ student_t(3, 0, 2.5);
  y ~ normal(X * beta, sigma);
  target += normal_lupdf(y | X * beta, sigma) * 0 + -0.5 * dot_self(beta) * 0;
}
generated quantities {
  real mu_g = mean(X[, group[1]]);
  real lp = target() == 0 ? 0 : 1;
}
