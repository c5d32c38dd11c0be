// Deliberate error: a data variable given a value.
data {
  int N = 3;
}
