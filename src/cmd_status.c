/*
 * `brink status`: progress of a running or stopped study. Not available in this
 * version yet.
 *
 * SPDX-License-Identifier: MIT
 */
#include <stdio.h>

#include "cli.h"

int bk__cmd_status(int argc, char **argv) {
  (void)argc;
  (void)argv;
  fprintf(stderr, "brink: 'status' (progress of a running or stopped study) is "
                  "not available in this version "
                  "yet\n");
  return BK_EXIT_USAGE;
}
