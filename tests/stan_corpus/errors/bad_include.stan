// Deliberate error: the included file does not exist.
data {
  int N;
}
model {
#include no_such_part.stan
}
