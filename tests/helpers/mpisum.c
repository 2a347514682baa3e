/*
 * An MPI test model: every rank adds its rank number, rank 0 prints the
 * total, and the program exits 3 when it did not get the ranks it was
 * asked for (argv[1]) or the total is not 0 + 1 + ... + (n - 1). With a
 * deck (argv[2]: lines "x1 = V", "x2 = V", "beta = B", as the test model
 * reads them) rank 0 also prints the limit state of the test model,
 * "result: g = G" with G = B - (x1 + x2 + ...)/sqrt(n), so that a study
 * gives the same records whatever the number of ranks.
 *
 *   bk-test-mpisum RANKS [DECK]
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <mpi.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int read_deck(const char *path, double *g) {
  FILE *f = fopen(path, "r");
  if (!f)
    return -1;
  char line[512];
  double sum = 0, beta = 2;
  int n = 0;
  while (fgets(line, sizeof line, f)) {
    char name[64];
    double v;
    if (line[0] == '#' || sscanf(line, " %63[A-Za-z0-9_] = %lf", name, &v) != 2)
      continue;
    if (strcmp(name, "beta") == 0) {
      beta = v;
    } else {
      sum += v;
      n++;
    }
  }
  fclose(f);
  *g = n > 0 ? beta - sum / sqrt((double)n) : beta;
  return 0;
}

int main(int argc, char **argv) {
  MPI_Init(&argc, &argv);
  int rank, size;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  MPI_Comm_size(MPI_COMM_WORLD, &size);
  long want = argc > 1 ? strtol(argv[1], NULL, 10) : 0;
  long mine = rank, total = 0;
  MPI_Reduce(&mine, &total, 1, MPI_LONG, MPI_SUM, 0, MPI_COMM_WORLD);
  int rc = 0;
  if (rank == 0) {
    printf("ranks: %d\nsum: %ld\n", size, total);
    if (size != want || total != (long)size * (size - 1) / 2) {
      fprintf(stderr, "bk-test-mpisum: %d ranks (sum %ld), asked for %ld\n",
              size, total, want);
      rc = 3;
    } else if (argc > 2) {
      double g;
      if (read_deck(argv[2], &g) != 0) {
        fprintf(stderr, "bk-test-mpisum: cannot read %s\n", argv[2]);
        rc = 2;
      } else {
        printf("result: g = %.17g\n", g);
      }
    }
    fflush(stdout);
  }
  MPI_Bcast(&rc, 1, MPI_INT, 0, MPI_COMM_WORLD);
  MPI_Finalize();
  return rc;
}
