/* Deliberate error: this comment is never closed.
data {
  int N;
}
