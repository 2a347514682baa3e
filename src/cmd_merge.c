/*
 * `brink merge`: combining the records of shards. Not available in this version
 * yet.
 *
 * SPDX-License-Identifier: MIT
 */
#include <stdio.h>

#include "cli.h"

int bk__cmd_merge(int argc, char **argv) {
  (void)argc;
  (void)argv;
  fprintf(stderr, "brink: 'merge' (combining the records of shards) is not "
                  "available in this version "
                  "yet\n");
  return BK_EXIT_USAGE;
}
