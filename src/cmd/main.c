/*
 * Entry point of the brink command; everything else is in cli.c.
 *
 * SPDX-License-Identifier: MIT
 */
#include "cmd/cli.h"

int main(int argc, char **argv) {
  return bk_cli_main(argc, argv);
}
