/*
 * `brink plan`: evaluations and wall time each method needs. Not available in
 * this version yet.
 *
 * SPDX-License-Identifier: MIT
 */
#include <stdio.h>

#include "cli.h"

int bk__cmd_plan(int argc, char **argv) {
  (void)argc;
  (void)argv;
  fprintf(stderr, "brink: 'plan' (evaluations and wall time each method needs) "
                  "is not available in this version "
                  "yet\n");
  return BK_EXIT_USAGE;
}
