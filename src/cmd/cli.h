/*
 * The brink command line: sub-commands, options, --help and exit codes.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_CLI_H
#define BK_CLI_H

/* The exit codes are bk_exit_t in base/error.h, with bk_error_exit(). */
int bk_cli_main(int argc, char **argv);

/* Shared by the commands (cli.c). */
#include "base/buf.h"
#include "base/error.h"
#include "methods/result.h"
#include "study/study.h"

/* Loads a study, printing its error; returns 0 or an exit code. */
int bk__cli_load_study(const char *path, bk_study_t **s);
/* Prints "brink: MESSAGE" and the hint to see --help; returns
 * BK_EXIT_USAGE. `fmt` takes one string argument. */
int bk__cli_usage_error(const char *fmt, const char *arg);
int bk__cli_is_help(const char *arg);
/* Prints a located error as "brink: file:line:col: message" with a caret. */
void bk__cli_print_error(const bk_error_t *err);
/* Creates `path` and its missing parents; 0 or a negative errno. */
int bk__cli_make_dirs(const char *path);
/* Writes data to folder/name via a temporary file and a rename. */
int bk__cli_write_atomic(const char *folder, const char *name,
                         const bk_buf_t *data, bk_error_t *err);

/* Writes report.txt and report.json into the run folder and, unless
 * `quiet`, prints the text; 0 or a negative code with `err` set. */
int bk__cli_write_reports(const bk_study_t *s, const bk_result_t *res,
                          int quiet, bk_error_t *err);

/* The sub-commands, one file each (cmd_NAME.c): each takes the arguments
 * after its name and returns an exit code. */
int bk__cmd_run(int argc, char **argv);
int bk__cmd_check(int argc, char **argv);
int bk__cmd_report(int argc, char **argv);
int bk__cmd_status(int argc, char **argv);
int bk__cmd_export(int argc, char **argv);
int bk__cmd_init(int argc, char **argv);
int bk__cmd_plan(int argc, char **argv);
int bk__cmd_submit(int argc, char **argv);
int bk__cmd_merge(int argc, char **argv);

#endif
