/*
 * The brink command line: sub-commands, options, --help and exit codes.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_CLI_H
#define BK_CLI_H

/* Exit codes of the brink command (DESIGN.md section 3). */
typedef enum {
  BK_EXIT_DONE = 0,     /* finished */
  BK_EXIT_RUNTIME = 1,  /* runtime error (records, model error limit) */
  BK_EXIT_USAGE = 2,    /* bad usage or study file; nothing written */
  BK_EXIT_STOPPED = 3   /* stopped before the end; resumable */
} bk_exit_t;

int bk_cli_main(int argc, char **argv);

#endif
