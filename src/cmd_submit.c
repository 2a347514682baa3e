/*
 * `brink submit`: a cluster job script. Not available in this version yet.
 *
 * SPDX-License-Identifier: MIT
 */
#include <stdio.h>

#include "cli.h"

int bk__cmd_submit(int argc, char **argv) {
  (void)argc;
  (void)argv;
  fprintf(
      stderr,
      "brink: 'submit' (a cluster job script) is not available in this version "
      "yet\n");
  return BK_EXIT_USAGE;
}
