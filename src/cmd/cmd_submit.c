/*
 * `brink submit`: renders a job script for Slurm or PBS from the templates
 * in cluster/ (MPI mode or job-array mode) into the run folder and prints
 * it; with --go, submits it (sbatch, qsub) and prints the job id.
 *
 * Templates hold {{NAME}} placeholders. A line whose placeholder has no
 * value (an option not given, such as --account) is left out, so one
 * template serves every combination of options.
 *
 * SPDX-License-Identifier: MIT
 */
#include <errno.h>
#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "cmd/cli.h"
#include "base/error.h"
#include "study/study.h"

#ifndef BK_CLUSTER_DIRS
#define BK_CLUSTER_DIRS ""
#endif

static const char submit_help[] =
    "usage: brink submit STUDY.yaml --scheduler slurm|pbs [options] [--go]\n"
    "\n"
    "Renders a job script from cluster/ into the run folder\n"
    "(job-SCHEDULER-MODE.sh) and prints it; with --go, submits it and\n"
    "prints the job id. The script stops brink cleanly before the time\n"
    "limit and requeues (Slurm) or resubmits (PBS) the job while brink\n"
    "exits 3, so the study resumes from its records.\n"
    "\n"
    "  --scheduler S     slurm or pbs\n"
    "  --mode M          mpi (default: brink run --mpi over --ranks ranks),\n"
    "                    array (--tasks shards, brink run --shard I/N;\n"
    "                    random, lhs and sobol studies; then brink merge)\n"
    "                    or steps (one brink in an allocation of --slots\n"
    "                    runs x run.ranks x run.threads CPUs; Slurm: each\n"
    "                    run a job step, needs run.launch: srun; PBS: the\n"
    "                    host list split between the runs)\n"
    "  --ranks N         MPI ranks, rank 0 coordinating (default 4)\n"
    "  --tasks N         array tasks (default 4)\n"
    "  --slots N         model runs at a time per rank or task, or in the\n"
    "                    allocation with --mode steps (default run.slots);\n"
    "                    each run takes run.threads x run.ranks CPUs\n"
    "  --time T          time limit HH:MM:SS or D-HH:MM:SS (default 01:00:00)\n"
    "  --signal-lead S   seconds before the limit to stop brink (default 120)\n"
    "  --partition P     Slurm partition (also --queue, the PBS queue)\n"
    "  --account A       account to charge\n"
    "  --memory M        memory per CPU (Slurm) or per job (PBS), e.g. 2G\n"
    "  --launcher CMD    MPI launcher (default: srun --mpi=pmix for Slurm,\n"
    "                    mpirun for PBS)\n"
    "  --max-requeue N   requeue at most N times (default 20)\n"
    "  --go              submit the script and print the job id\n"
    "See docs/cluster.md.\n";

typedef struct {
  const char *name;
  char value[PATH_MAX + 64];
} var_t;

enum {
  V_STUDY,
  V_STUDYDIR,
  V_FOLDER,
  V_BRINK,
  V_NAME,
  V_RANKS,
  V_TASKS,
  V_LAST,
  V_SLOTS,
  V_TIME,
  V_WALLTIME,
  V_LEAD,
  V_STOP_AFTER,
  V_PARTITION,
  V_QUEUE,
  V_ACCOUNT,
  V_MEMORY,
  V_LAUNCH,
  V_MAX_REQUEUE,
  V_SCRIPT,
  V_CPUS,
  V_CORES,
  V_THREADS,
  V_RUN_RANKS,
  V_STEP_TASKS,
  V__COUNT
};

static const char *const var_names[V__COUNT] = {
    "STUDY",    "STUDYDIR", "FOLDER",     "BRINK",       "NAME",
    "RANKS",    "TASKS",    "LAST",       "SLOTS",       "TIME",
    "WALLTIME", "LEAD",     "STOP_AFTER", "PARTITION",   "QUEUE",
    "ACCOUNT",  "MEMORY",   "LAUNCH",     "MAX_REQUEUE", "SCRIPT",
    "CPUS",     "CORES",    "THREADS",    "RUN_RANKS",   "STEP_TASKS"};

/* Parses HH:MM:SS, MM:SS, SS or D-HH:MM:SS into seconds; -1 when bad. */
static long parse_time(const char *t) {
  long days = 0;
  const char *dash = strchr(t, '-');
  char *end;
  if (dash) {
    days = strtol(t, &end, 10);
    if (end != dash || days < 0)
      return -1;
    t = dash + 1;
  }
  long part[3];
  int n = 0;
  for (;;) {
    if (*t < '0' || *t > '9' || n == 3)
      return -1;
    part[n++] = strtol(t, &end, 10);
    if (*end == '\0')
      break;
    if (*end != ':')
      return -1;
    t = end + 1;
  }
  long s = 0;
  for (int i = 0; i < n; i++)
    s = s * 60 + part[i];
  if (dash && n < 3)
    return -1;
  for (int i = 1; i < n; i++)
    if (part[i] >= 60)
      return -1;
  return days * 86400 + s;
}

/* Characters a path may hold to appear unquoted in a job script. */
static int is_plain_path(const char *p) {
  for (; *p; p++)
    if (!(*p == '/' || *p == '.' || *p == '-' || *p == '_' || *p == '+' ||
          *p == ',' || *p == '@' || *p == '%' || *p == ':' ||
          (*p >= '0' && *p <= '9') || (*p >= 'a' && *p <= 'z') ||
          (*p >= 'A' && *p <= 'Z')))
      return 0;
  return 1;
}

/* Renders `tpl`: each {{NAME}} replaced; a line naming an empty or unknown
 * placeholder is dropped. */
static int render(const char *tpl, const var_t *vars, bk_buf_t *out) {
  const char *line = tpl;
  bk_buf_t l;
  bk_buf_init(&l);
  int bad = 0; /* an append failed: the script would be incomplete */
  while (*line && !bad) {
    const char *eol = strchr(line, '\n');
    size_t len = eol ? (size_t)(eol - line + 1) : strlen(line);
    bk_buf_reset(&l);
    int drop = 0;
    for (size_t i = 0; i < len;) {
      if (line[i] == '{' && i + 1 < len && line[i + 1] == '{') {
        const char *close = strstr(line + i + 2, "}}");
        if (close && close < line + len) {
          size_t nl = (size_t)(close - (line + i + 2));
          const char *val = NULL;
          for (int v = 0; v < V__COUNT; v++)
            if (strlen(vars[v].name) == nl &&
                strncmp(vars[v].name, line + i + 2, nl) == 0)
              val = vars[v].value;
          if (!val || !*val)
            drop = 1;
          else
            bad |= bk_buf_puts(&l, val);
          i = (size_t)(close + 2 - line);
          continue;
        }
      }
      bad |= bk_buf_putc(&l, line[i]);
      i++;
    }
    if (!drop && l.data)
      bad |= bk_buf_append(out, l.data, l.len);
    line += len;
  }
  bk_buf_close(&l);
  if (!bad && !out->data)
    bad = bk_buf_puts(out, "");
  return bad ? BK_ENOMEM : 0;
}

/* The text of `path`, or NULL when it cannot be read (*oom set when
 * memory ran out). */
static char *read_text(const char *path, int *oom) {
  FILE *f = fopen(path, "r");
  if (!f)
    return NULL;
  bk_buf_t b;
  bk_buf_init(&b);
  char chunk[4096];
  size_t n;
  int rc = 0;
  while (rc == 0 && (n = fread(chunk, 1, sizeof chunk, f)) > 0)
    rc = bk_buf_append(&b, chunk, n);
  if (rc == 0 && ferror(f))
    rc = BK_EIO;
  fclose(f);
  if (rc == 0 && !b.data)
    rc = bk_buf_puts(&b, "");
  if (rc) {
    *oom = rc == BK_ENOMEM;
    bk_buf_close(&b);
    return NULL;
  }
  return b.data;
}

/* Finds cluster/NAME: $BRINK_CLUSTER_DIR, the cluster/ folder beside the
 * executable's folder (a build inside the source tree), the source tree
 * and the installed copy. */
static char *find_template(const char *name, char *where, size_t cap,
                           int *oom) {
  bk_buf_t dirs;
  bk_buf_init(&dirs);
  const char *env = getenv("BRINK_CLUSTER_DIR");
  if (env && *env)
    bk_buf_printf(&dirs, "%s:", env);
  char exe[PATH_MAX];
  ssize_t k = readlink("/proc/self/exe", exe, sizeof exe - 1);
  if (k > 0) {
    exe[k] = '\0';
    char *s = strrchr(exe, '/');
    if (s) {
      *s = '\0';
      bk_buf_printf(&dirs, "%s/../cluster:%s/../share/brink/cluster:", exe,
                    exe);
    }
  }
  *oom = bk_buf_puts(&dirs, BK_CLUSTER_DIRS) != 0;
  char *text = NULL;
  char *save = NULL;
  for (char *d = *oom ? NULL : strtok_r(dirs.data, ":", &save);
       d && !text && !*oom; d = strtok_r(NULL, ":", &save)) {
    snprintf(where, cap, "%s/%s", d, name);
    text = read_text(where, oom);
  }
  bk_buf_close(&dirs);
  return text;
}

static int parse_count(const char *opt, const char *v, long lo, long *out) {
  char *end;
  long n = v ? strtol(v, &end, 10) : 0;
  if (!v || *end || n < lo || n > 100000) {
    fprintf(stderr,
            "brink: submit: %s takes a whole number >= %ld (got '%s')\n", opt,
            lo, v ? v : "");
    return BK_EXIT_USAGE;
  }
  *out = n;
  return 0;
}

/* Runs `cmd` (argv) and returns its first output line in out; 0 or an exit
 * code. Both ends of the pipe are closed on every path, and output beyond
 * `cap` is read and dropped, so the child never blocks on a full pipe. */
static int run_capture(char *const cmd[], char *out, size_t cap) {
  int fd[2];
  out[0] = '\0';
  if (pipe(fd) != 0) {
    fprintf(stderr, "brink: cannot run %s: %s\n", cmd[0], strerror(errno));
    return BK_EXIT_RUNTIME;
  }
  pid_t pid = fork();
  if (pid < 0) {
    fprintf(stderr, "brink: cannot run %s: %s\n", cmd[0], strerror(errno));
    close(fd[0]);
    close(fd[1]);
    return BK_EXIT_RUNTIME;
  }
  if (pid == 0) {
    dup2(fd[1], 1);
    close(fd[0]);
    close(fd[1]);
    execvp(cmd[0], cmd);
    fprintf(stderr, "brink: cannot run %s: %s\n", cmd[0], strerror(errno));
    _exit(127);
  }
  close(fd[1]);
  size_t n = 0;
  for (;;) {
    char sink[512];
    int full = n + 1 >= cap;
    ssize_t r = full ? read(fd[0], sink, sizeof sink)
                     : read(fd[0], out + n, cap - 1 - n);
    if (r < 0 && errno == EINTR)
      continue;
    if (r <= 0)
      break;
    if (!full)
      n += (size_t)r;
  }
  out[n] = '\0';
  close(fd[0]);
  int st;
  while (waitpid(pid, &st, 0) < 0 && errno == EINTR)
    ;
  char *nl = strchr(out, '\n');
  if (nl)
    *nl = '\0';
  if (!WIFEXITED(st) || WEXITSTATUS(st) != 0) {
    fprintf(stderr, "brink: %s failed (%s %d)%s%s\n", cmd[0],
            WIFEXITED(st) ? "exit status" : "signal",
            WIFEXITED(st) ? WEXITSTATUS(st) : WTERMSIG(st), *out ? ": " : "",
            out);
    return BK_EXIT_RUNTIME;
  }
  return 0;
}

int bk__cmd_submit(int argc, char **argv) {
  const char *path = NULL, *sched = NULL, *mode = "mpi", *time_s = "01:00:00";
  const char *partition = "", *account = "", *memory = "", *launcher = NULL;
  long ranks = 4, tasks = 4, slots = 0, lead = 120, max_requeue = 20;
  int go = 0, rc;
  for (int i = 0; i < argc; i++) {
    const char *a = argv[i];
    const char *v = i + 1 < argc ? argv[i + 1] : NULL;
    if (bk__cli_is_help(a)) {
      fputs(submit_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(a, "--go") == 0) {
      go = 1;
      continue;
    } else if (a[0] != '-') {
      if (path)
        return bk__cli_usage_error(
            "submit: one study file at a time ('%s' is extra)", a);
      path = a;
      continue;
    }
    if (!v)
      return bk__cli_usage_error("submit: %s needs a value", a);
    i++;
    if (strcmp(a, "--scheduler") == 0)
      sched = v;
    else if (strcmp(a, "--mode") == 0)
      mode = v;
    else if (strcmp(a, "--time") == 0)
      time_s = v;
    else if (strcmp(a, "--partition") == 0 || strcmp(a, "--queue") == 0)
      partition = v;
    else if (strcmp(a, "--account") == 0)
      account = v;
    else if (strcmp(a, "--memory") == 0)
      memory = v;
    else if (strcmp(a, "--launcher") == 0)
      launcher = v;
    else if (strcmp(a, "--ranks") == 0) {
      if ((rc = parse_count(a, v, 2, &ranks)))
        return rc;
    } else if (strcmp(a, "--tasks") == 0) {
      if ((rc = parse_count(a, v, 1, &tasks)))
        return rc;
    } else if (strcmp(a, "--slots") == 0) {
      if ((rc = parse_count(a, v, 1, &slots)))
        return rc;
    } else if (strcmp(a, "--signal-lead") == 0) {
      if ((rc = parse_count(a, v, 1, &lead)))
        return rc;
    } else if (strcmp(a, "--max-requeue") == 0) {
      if ((rc = parse_count(a, v, 0, &max_requeue)))
        return rc;
    } else
      return bk__cli_usage_error("submit: unknown option '%s'", a);
  }
  if (!path)
    return bk__cli_usage_error("submit: %s",
                               "give a study file, e.g. brink submit "
                               "study.yaml --scheduler slurm");
  if (!sched || (strcmp(sched, "slurm") && strcmp(sched, "pbs")))
    return bk__cli_usage_error("submit: %s",
                               "--scheduler slurm or --scheduler pbs");
  if (strcmp(mode, "mpi") && strcmp(mode, "array") && strcmp(mode, "steps"))
    return bk__cli_usage_error(
        "submit: --mode is mpi, array or steps, not '%s'", mode);
  long secs = parse_time(time_s);
  if (secs <= 0)
    return bk__cli_usage_error("submit: --time takes HH:MM:SS or "
                               "D-HH:MM:SS, not '%s'",
                               time_s);
  if (lead >= secs)
    return bk__cli_usage_error("submit: %s",
                               "--signal-lead must be shorter than --time");
  const char *vals[] = {partition, account, memory};
  for (size_t k = 0; k < 3; k++)
    if (!is_plain_path(vals[k]))
      return bk__cli_usage_error("submit: '%s' holds a blank or a shell "
                                 "character",
                                 vals[k]);
  bk_study_t *s;
  if ((rc = bk__cli_load_study(path, &s)) != 0)
    return rc;
  int array = strcmp(mode, "array") == 0;
  if (array && (s->analysis.method != BK_METHOD_RANDOM &&
                s->analysis.method != BK_METHOD_LHS &&
                s->analysis.method != BK_METHOD_SOBOL)) {
    fprintf(stderr,
            "brink: submit: --mode array shards the keys, which only the "
            "sampling methods (random, lhs, sobol) allow; %s chooses its "
            "batches from earlier responses: use --mode mpi\n",
            bk_study_method_name(s->analysis.method));
    bk_study_free(s);
    return BK_EXIT_USAGE;
  }
  if (array && !s->model.present) {
    fprintf(stderr,
            "brink: submit: --mode array runs brink run --shard, which needs "
            "a study with a model section (without one, a study runs in "
            "process and keeps no records to merge): use --mode mpi, or run "
            "it on one node\n");
    bk_study_free(s);
    return BK_EXIT_USAGE;
  }
  int steps = strcmp(mode, "steps") == 0;
  if (steps && strcmp(sched, "slurm") == 0 && s->run.launch != BK_LAUNCH_SRUN) {
    fprintf(stderr,
            "brink: submit: --mode steps runs brink as one process that "
            "starts each model run as a job step; the study needs "
            "run.launch: srun (with model.command the program each rank "
            "runs)\n");
    bk_study_free(s);
    return BK_EXIT_USAGE;
  }
  if (steps && strcmp(sched, "pbs") == 0 && s->run.launch != BK_LAUNCH_DIRECT) {
    fprintf(stderr, "brink: submit: PBS has no job steps: with --scheduler "
                    "pbs --mode steps the study needs run.launch: direct, "
                    "and each run starts its ranks on its share of the "
                    "host list ({{ _hosts }}, BRINK_HOSTS)\n");
    bk_study_free(s);
    return BK_EXIT_USAGE;
  }
  if ((rc = bk__cli_make_dirs(s->run.folder)) != 0) {
    fprintf(stderr, "brink: cannot create the run folder %s: %s\n",
            s->run.folder, bk_strerror(rc));
    bk_study_free(s);
    return BK_EXIT_RUNTIME;
  }
  var_t vars[V__COUNT];
  memset(vars, 0, sizeof vars);
  for (int v = 0; v < V__COUNT; v++)
    vars[v].name = var_names[v];
  char *study_abs = realpath(path, NULL);
  char *dir_abs = realpath(s->dir && *s->dir ? s->dir : ".", NULL);
  char *folder_abs = realpath(s->run.folder, NULL);
  char exe[PATH_MAX];
  ssize_t k = readlink("/proc/self/exe", exe, sizeof exe - 1);
  exe[k > 0 ? k : 0] = '\0';
  snprintf(vars[V_STUDY].value, sizeof vars[0].value, "%s",
           study_abs ? study_abs : path);
  snprintf(vars[V_STUDYDIR].value, sizeof vars[0].value, "%s",
           dir_abs ? dir_abs : ".");
  snprintf(vars[V_FOLDER].value, sizeof vars[0].value, "%s",
           folder_abs ? folder_abs : s->run.folder);
  snprintf(vars[V_BRINK].value, sizeof vars[0].value, "%s",
           k > 0 ? exe : "brink");
  free(study_abs);
  free(dir_abs);
  free(folder_abs);
  for (int v = V_STUDY; v <= V_BRINK; v++)
    if (!is_plain_path(vars[v].value)) {
      fprintf(stderr,
              "brink: submit: the path %s holds a blank or a shell "
              "character, which job-script directives cannot quote; move "
              "the study or the run folder\n",
              vars[v].value);
      bk_study_free(s);
      return BK_EXIT_USAGE;
    }
  snprintf(vars[V_NAME].value, sizeof vars[0].value, "brink-%.60s", s->name);
  for (char *p = vars[V_NAME].value; *p; p++)
    if (!is_plain_path((char[]){*p, 0}) || *p == '/' || *p == '%')
      *p = '_';
  snprintf(vars[V_RANKS].value, sizeof vars[0].value, "%ld", ranks);
  snprintf(vars[V_TASKS].value, sizeof vars[0].value, "%ld", tasks);
  snprintf(vars[V_LAST].value, sizeof vars[0].value, "%ld", tasks - 1);
  long nslots = slots ? slots : (long)s->run.slots;
  long cores = s->run.cores > 0 ? s->run.cores : 1;
  snprintf(vars[V_SLOTS].value, sizeof vars[0].value, "%ld", nslots);
  snprintf(vars[V_CPUS].value, sizeof vars[0].value, "%ld", nslots * cores);
  snprintf(vars[V_CORES].value, sizeof vars[0].value, "%ld", cores);
  snprintf(vars[V_THREADS].value, sizeof vars[0].value, "%d",
           s->run.threads > 0 ? s->run.threads : 1);
  snprintf(vars[V_RUN_RANKS].value, sizeof vars[0].value, "%d",
           s->run.ranks > 0 ? s->run.ranks : 1);
  snprintf(vars[V_STEP_TASKS].value, sizeof vars[0].value, "%ld",
           nslots * (s->run.ranks > 0 ? s->run.ranks : 1));
  snprintf(vars[V_TIME].value, sizeof vars[0].value, "%ld:%02ld:%02ld",
           secs / 3600, secs / 60 % 60, secs % 60);
  snprintf(vars[V_WALLTIME].value, sizeof vars[0].value, "%s",
           vars[V_TIME].value);
  snprintf(vars[V_LEAD].value, sizeof vars[0].value, "%ld", lead);
  snprintf(vars[V_STOP_AFTER].value, sizeof vars[0].value, "%ld", secs - lead);
  snprintf(vars[V_PARTITION].value, sizeof vars[0].value, "%s", partition);
  snprintf(vars[V_QUEUE].value, sizeof vars[0].value, "%s", partition);
  snprintf(vars[V_ACCOUNT].value, sizeof vars[0].value, "%s", account);
  snprintf(vars[V_MEMORY].value, sizeof vars[0].value, "%s", memory);
  snprintf(vars[V_LAUNCH].value, sizeof vars[0].value, "%s",
           launcher                      ? launcher
           : strcmp(sched, "slurm") == 0 ? "srun --mpi=pmix"
                                         : "mpirun");
  snprintf(vars[V_MAX_REQUEUE].value, sizeof vars[0].value, "%ld", max_requeue);
  char script_name[64];
  snprintf(script_name, sizeof script_name, "job-%s-%s.sh", sched, mode);
  snprintf(vars[V_SCRIPT].value, sizeof vars[0].value, "%.*s/%s",
           (int)(sizeof vars[0].value - sizeof script_name - 2),
           vars[V_FOLDER].value, script_name);

  char tname[64], where[PATH_MAX + 80];
  snprintf(tname, sizeof tname, "%s-%s.sh", sched, mode);
  int oom = 0;
  char *tpl = find_template(tname, where, sizeof where, &oom);
  if (!tpl && oom) {
    fprintf(stderr, "brink: out of memory\n");
    bk_study_free(s);
    return BK_EXIT_RUNTIME;
  }
  if (!tpl) {
    fprintf(stderr,
            "brink: submit: the job-script template cluster/%s was not found "
            "(set BRINK_CLUSTER_DIR to the folder holding it)\n",
            tname);
    bk_study_free(s);
    return BK_EXIT_RUNTIME;
  }
  bk_buf_t out;
  bk_buf_init(&out);
  rc = render(tpl, vars, &out);
  bk_free(tpl);
  if (rc) {
    fprintf(stderr, "brink: out of memory\n");
    bk_buf_close(&out);
    bk_study_free(s);
    return BK_EXIT_RUNTIME;
  }
  bk_error_t err;
  bk_error_clear(&err);
  if (bk__cli_write_atomic(s->run.folder, script_name, &out, &err)) {
    bk__cli_print_error(&err);
    bk_buf_close(&out);
    bk_study_free(s);
    return BK_EXIT_RUNTIME;
  }
  chmod(vars[V_SCRIPT].value, 0755);
  int code = BK_EXIT_DONE;
  if (!go) {
    fputs(out.data, stdout);
    fprintf(stderr,
            "brink: job script written to %s; submit it with `%s %s` or run "
            "brink submit again with --go\n",
            vars[V_SCRIPT].value, strcmp(sched, "slurm") ? "qsub" : "sbatch",
            vars[V_SCRIPT].value);
  } else {
    char id[256];
    char *slurm_cmd[] = {"sbatch", "--parsable", vars[V_SCRIPT].value, NULL};
    char *pbs_cmd[] = {"qsub", vars[V_SCRIPT].value, NULL};
    code = run_capture(strcmp(sched, "slurm") == 0 ? slurm_cmd : pbs_cmd, id,
                       sizeof id);
    if (code == 0) {
      char *semi = strchr(id, ';'); /* sbatch --parsable: "id;cluster" */
      if (semi)
        *semi = '\0';
      printf("%s\n", id);
      fprintf(stderr, "brink: submitted %s as job %s%s\n", vars[V_SCRIPT].value,
              id,
              array ? "; when every task is done, run `brink merge` on the "
                      "study"
                    : "");
    }
  }
  bk_buf_close(&out);
  bk_study_free(s);
  return code;
}
