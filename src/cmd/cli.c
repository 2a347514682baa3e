/*
 * The brink command line: the table of sub-commands, the top-level --help,
 * and helpers the commands share (usage errors, located errors, folders,
 * atomic writes). Each command lives in its own file, cmd_NAME.c. Usage
 * goes to stdout when asked for and to stderr (exit 2) on misuse.
 *
 * SPDX-License-Identifier: MIT
 */
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "cmd/cli.h"
#include "base/error.h"
#include "reports/report.h"
#include "study/study.h"

static const char usage_text[] =
    "usage: brink COMMAND [OPTIONS]\n"
    "\n"
    "Estimates the probability that a limit state is violated, by sampling\n"
    "the random inputs of a model described in a study file.\n"
    "\n"
    "commands:\n"
    "  init FOLDER          write a starter study that runs as is "
    "(--analytic,\n"
    "                       --script, --fe)\n"
    "  check STUDY.yaml     validate the study and print its probabilistic "
    "model;\n"
    "                       --try runs the model once at the medians\n"
    "  plan STUDY.yaml      evaluations and time needed per method\n"
    "  run STUDY.yaml       run the study, or resume it where it stopped\n"
    "  status FOLDER|STUDY  progress of a running or stopped study\n"
    "  report FOLDER|STUDY  the result of a run (--json, --html FILE)\n"
    "  export FOLDER|STUDY  every evaluation as a table (--csv, --json-lines)\n"
    "  submit STUDY.yaml    a job script for a cluster scheduler\n"
    "  merge STUDY.yaml     combine the records of shards (run --shard)\n"
    "  help [COMMAND]       show help for a command\n"
    "\n"
    "A first study: brink init my-study --script, then\n"
    "brink check my-study/study.yaml --try and brink run my-study/study.yaml.\n"
    "\n"
    "options:\n"
    "  -h, --help           show this help (or `brink COMMAND --help`)\n"
    "  --version            print the version\n"
    "\n"
    "exit codes: 0 done, 1 runtime error, 2 bad usage or study file,\n"
    "            3 stopped before the end (run the same command to resume)\n";

int bk__cli_usage_error(const char *fmt, const char *arg) {
  fprintf(stderr, "brink: ");
  fprintf(stderr, fmt, arg);
  fprintf(stderr, "\n(see `brink --help`)\n");
  return BK_EXIT_USAGE;
}

int bk__cli_is_help(const char *a) {
  return strcmp(a, "-h") == 0 || strcmp(a, "--help") == 0;
}

void bk__cli_print_error(const bk_error_t *err) {
  fputs("brink: ", stderr);
  bk_error_print(err, stderr);
}

/* Creates `path` and its missing parents. */
int bk__cli_make_dirs(const char *path) {
  char *p = bk_strdup(path);
  if (!p)
    return BK_ENOMEM;
  int rc = 0;
  for (char *q = p + 1; *q; q++) {
    if (*q != '/')
      continue;
    *q = '\0';
    if (mkdir(p, 0777) != 0 && errno != EEXIST) {
      rc = -errno;
      break;
    }
    *q = '/';
  }
  if (rc == 0 && mkdir(p, 0777) != 0 && errno != EEXIST)
    rc = -errno;
  bk_free(p);
  return rc;
}

/* Writes `data` to folder/name through a temporary file and a rename, so a
 * reader never sees half a file. */
int bk__cli_write_atomic(const char *folder, const char *name,
                         const bk_buf_t *data, bk_error_t *err) {
  bk_buf_t tmp, dst;
  bk_buf_init(&tmp);
  bk_buf_init(&dst);
  bk_buf_printf(&tmp, "%s/.%s.tmp", folder, name);
  bk_buf_printf(&dst, "%s/%s", folder, name);
  int rc = 0;
  int fd = open(tmp.data, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0666);
  if (fd < 0) {
    rc = bk_error_set(err, -errno, dst.data, 0, 0, "cannot write: %s",
                      strerror(errno));
    goto out;
  }
  size_t off = 0;
  while (off < data->len) {
    ssize_t w = write(fd, data->data + off, data->len - off);
    if (w < 0 && errno == EINTR)
      continue;
    if (w < 0) {
      rc = bk_error_set(err, -errno, dst.data, 0, 0, "cannot write: %s",
                        strerror(errno));
      close(fd);
      unlink(tmp.data);
      goto out;
    }
    off += (size_t)w;
  }
  if (fsync(fd) != 0 || close(fd) != 0) {
    rc = bk_error_set(err, -errno, dst.data, 0, 0, "cannot write: %s",
                      strerror(errno));
    unlink(tmp.data);
    goto out;
  }
  if (rename(tmp.data, dst.data) != 0) {
    rc = bk_error_set(err, -errno, dst.data, 0, 0, "cannot write: %s",
                      strerror(errno));
    unlink(tmp.data);
  }
out:
  bk_buf_close(&tmp);
  bk_buf_close(&dst);
  return rc;
}

int bk__cli_load_study(const char *path, bk_study_t **s) {
  bk_error_t err;
  bk_error_clear(&err);
  if (bk_study_load(path, s, &err)) {
    bk__cli_print_error(&err);
    return bk_error_exit(err.code);
  }
  return 0;
}

typedef struct {
  const char *name;
  int (*fn)(int argc, char **argv);
} command_t;

static const command_t commands[] = {
    {"run", bk__cmd_run},       {"check", bk__cmd_check},
    {"report", bk__cmd_report}, {"status", bk__cmd_status},
    {"export", bk__cmd_export}, {"init", bk__cmd_init},
    {"plan", bk__cmd_plan},     {"submit", bk__cmd_submit},
    {"merge", bk__cmd_merge},
};

int bk_cli_main(int argc, char **argv) {
  char *help_argv[3];
  if (argc < 2) {
    fputs(usage_text, stderr);
    return BK_EXIT_USAGE;
  }
  const char *cmd = argv[1];
  if (bk__cli_is_help(cmd)) {
    fputs(usage_text, stdout);
    return BK_EXIT_DONE;
  }
  if (strcmp(cmd, "--version") == 0) {
    printf("brink %s\n", BK_VERSION);
    return BK_EXIT_DONE;
  }
  if (strcmp(cmd, "help") == 0) {
    if (argc < 3) {
      fputs(usage_text, stdout);
      return BK_EXIT_DONE;
    }
    help_argv[0] = argv[0];
    help_argv[1] = argv[2];
    help_argv[2] = "--help";
    cmd = argv[2];
    argc = 3;
    argv = help_argv;
  }
  for (size_t i = 0; i < sizeof commands / sizeof commands[0]; i++)
    if (strcmp(cmd, commands[i].name) == 0)
      return commands[i].fn(argc - 2, argv + 2);
  return bk__cli_usage_error("unknown command '%s'", cmd);
}

int bk__cli_write_reports(const bk_study_t *s, const bk_result_t *res,
                          int quiet, bk_error_t *err) {
  bk_buf_t text, json;
  bk_buf_init(&text);
  bk_buf_init(&json);
  int rc = bk_report_text(s, res, &text);
  if (rc == 0)
    rc = bk_report_json(s, res, &json);
  if (rc)
    bk_error_set(err, rc, s->run.folder, 0, 0, "cannot build the report: %s",
                 bk_strerror(rc));
  else if ((rc = bk__cli_write_atomic(s->run.folder, "report.json", &json,
                                      err)) == 0 &&
           (rc = bk__cli_write_atomic(s->run.folder, "report.txt", &text,
                                      err)) == 0 &&
           !quiet)
    fputs(text.data, stdout);
  bk_buf_close(&text);
  bk_buf_close(&json);
  return rc;
}
