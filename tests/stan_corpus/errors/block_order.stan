// Deliberate error: the model block comes before the data block.
model {
}
data {
  int N;
}
