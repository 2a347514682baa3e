/* Test model program: to be written (issue 3). */
int main(void) {
  return 0;
}
