/*
 * `brink init`: a starter study to edit. Not available in this version yet.
 *
 * SPDX-License-Identifier: MIT
 */
#include <stdio.h>

#include "cli.h"

int bk__cmd_init(int argc, char **argv) {
  (void)argc;
  (void)argv;
  fprintf(stderr, "brink: 'init' (a starter study to edit) is not available in "
                  "this version "
                  "yet\n");
  return BK_EXIT_USAGE;
}
