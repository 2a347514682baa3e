/*
 * `brink export`: one row per evaluation, as CSV. Not available in this version
 * yet.
 *
 * SPDX-License-Identifier: MIT
 */
#include <stdio.h>

#include "cli.h"

int bk__cmd_export(int argc, char **argv) {
  (void)argc;
  (void)argv;
  fprintf(stderr, "brink: 'export' (one row per evaluation, as CSV) is not "
                  "available in this version "
                  "yet\n");
  return BK_EXIT_USAGE;
}
