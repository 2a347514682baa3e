/*
 * Integration tests of the cluster path: `brink run --mpi` under mpirun
 * with 3 ranks gives the records and report of a local run; a worker rank
 * killed with SIGKILL, then a rerun, completes with identical records and
 * nothing recorded twice; a worker that cannot run models is reported, not
 * waited for; node-local scratch with kept folders copied back; --shard
 * and merge (missing, incomplete and foreign shards named, adaptive
 * methods refused); a single-node Slurm running `brink submit --go` in the
 * MPI mode and as a 4-task array, and a job stopped by the pre-timeout
 * signal, requeued, completing; rendered PBS and Slurm scripts checked for
 * content.
 *
 * MPI programs run as separate processes (mpirun ... brink), never inside
 * this test process. Tests skip when mpirun or Slurm is absent; CI
 * installs both (scripts/setup) and starts Slurm through
 * tests/cluster/start-slurm.sh.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <dirent.h>
#include <errno.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

static char dir[256];
static char *owned[256];
static int nowned;

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-cluster-XXXXXX");
  cr_assert(mkdtemp(dir));
  /* mpirun as root (CI) and more ranks than cores. */
  setenv("OMPI_ALLOW_RUN_AS_ROOT", "1", 1);
  setenv("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1", 1);
  setenv("OMPI_MCA_rmaps_base_oversubscribe", "1", 1);
  /* OpenMPI keeps allocations until exit; under AddressSanitizer the leak
   * report would change the exit status of every rank. */
  const char *asan = getenv("ASAN_OPTIONS");
  char buf[512];
  snprintf(buf, sizeof buf, "%s%sdetect_leaks=0", asan ? asan : "",
           asan && *asan ? ":" : "");
  setenv("ASAN_OPTIONS", buf, 1);
}

static void teardown(void) {
  for (int i = 0; i < nowned; i++)
    free(owned[i]);
  nowned = 0;
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(cluster, .init = setup, .fini = teardown, .timeout = 400);

static const char *env(const char *name) {
  const char *v = getenv(name);
  cr_assert(v, "%s must be set", name);
  return v;
}

static void write_file(const char *name, const char *fmt, ...) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "w");
  cr_assert(f, "%s", p);
  va_list ap;
  va_start(ap, fmt);
  vfprintf(f, fmt, ap);
  va_end(ap);
  fclose(f);
}

static char *read_file(const char *name) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "r");
  if (!f)
    return NULL;
  size_t cap = 1 << 16, n = 0, r;
  char *buf = malloc(cap);
  while ((r = fread(buf + n, 1, cap - n - 1, f)) > 0) {
    n += r;
    if (n + 1 >= cap)
      buf = realloc(buf, cap *= 2);
  }
  buf[n] = '\0';
  fclose(f);
  if (nowned < 256)
    owned[nowned++] = buf;
  return buf;
}

static int exists(const char *name) {
  char p[600];
  struct stat st;
  snprintf(p, sizeof p, "%s/%s", dir, name);
  return stat(p, &st) == 0;
}

/* Runs a shell command in the test folder; returns its exit status. */
static int sh(const char *fmt, ...) {
  char body[2048], cmd[2400];
  va_list ap;
  va_start(ap, fmt);
  vsnprintf(body, sizeof body, fmt, ap);
  va_end(ap);
  snprintf(cmd, sizeof cmd, "cd '%s' && { %s ; } </dev/null", dir, body);
  int st = system(cmd);
  cr_assert(WIFEXITED(st), "%s", body);
  return WEXITSTATUS(st);
}

static int brink(const char *args) {
  return sh("'%s' %s >out.txt 2>err.txt", env("BRINK_EXE"), args);
}

static int mpirun(int ranks, const char *args) {
  return sh("mpirun -n %d '%s' %s >out.txt 2>err.txt", ranks, env("BRINK_EXE"),
            args);
}

static int have(const char *prog) {
  char cmd[256];
  snprintf(cmd, sizeof cmd, "command -v %s >/dev/null 2>&1", prog);
  return system(cmd) == 0;
}

/* Skips unless mpirun runs and this brink was built with MPI. */
static void need_mpi(void) {
  if (!have("mpirun"))
    cr_skip_test("mpirun (Debian package openmpi-bin) is not installed");
  write_file("probe.yaml", "name: p\nvariables:\n  a: {type: normal, mean: "
                           "0, sd: 1}\nlimit_state: 3 - a\n"
                           "analysis: {method: random, samples: 10}\n"
                           "run: {folder: probe}\n");
  int rc = mpirun(1, "run --mpi --quiet probe.yaml");
  if (rc == 2 && strstr(read_file("err.txt"), "without MPI"))
    cr_skip_test("this brink was built without MPI");
  cr_assert_eq(rc, 0, "%s", read_file("err.txt"));
}

/* A study of two standard normal inputs through the test model:
 * g = 1.5 - (a + b)/sqrt(2), Pf = Phi(-1.5) (see test_run_model.c). */
static void write_study(const char *name, const char *folder,
                        const char *method, int samples, const char *mode,
                        const char *extra_run) {
  write_file("deck.txt", "# evaluation {{ _key }}\n"
                         "x1 = {{ a : %%.17g }}\n"
                         "x2 = {{ b : %%.17g }}\n"
                         "beta = 1.5\n");
  write_file(name,
             "name: %s\n"
             "seed: 77\n"
             "variables:\n"
             "  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n"
             "model:\n"
             "  files: [{template: deck.txt, to: in.txt}]\n"
             "  command: ['%s', in.txt]\n"
             "  env: {BK_MODEL_MODE: '%s'}\n"
             "  timeout: 20\n"
             "  outputs:\n"
             "    g: {file: out.txt, pattern: 'result: g = (\\S+)'}\n"
             "limit_state: g\n"
             "analysis: {method: %s, samples: %d%s}\n"
             "run: {folder: %s, slots: 2%s}\n",
             folder, env("BRINK_TEST_MODEL"), mode, method, samples,
             strcmp(method, "random") ? ", replicates: 4" : "", folder,
             extra_run);
}

/* The records of a log as comparable text: without the columns that
 * depend on timing or place (seconds, host, folder, checksum), sorted;
 * the reason of a fault is compared. */
static char *canonical_records(const char *folder) {
  cr_assert_eq(sh("grep -v '^#' %s/records.log | tail -n +2 | "
                  "awk -F'\\t' '{ s = $1 \"\\t\" $2 \"\\t\" $3; "
                  "for (i = 6; i <= NF - 2; i++) s = s \"\\t\" $i; print s }' "
                  "| LC_ALL=C sort > %s.canon",
                  folder, folder),
               0);
  char name[300];
  snprintf(name, sizeof name, "%s.canon", folder);
  return read_file(name);
}

/* report.json without what differs between equal runs: times, the number
 * of sessions (a requeued job has two), the study's path and name. */
static char *canonical_report(const char *folder) {
  cr_assert_eq(sh("grep -v '\"seconds\"\\|\"seconds_total\"\\|"
                  "\"sessions\"\\|\"study\"\\|\"name\"' "
                  "%s/report.json > "
                  "%s.rep",
                  folder, folder),
               0);
  char name[300];
  snprintf(name, sizeof name, "%s.rep", folder);
  return read_file(name);
}

static int count_lines(const char *s) {
  int n = 0;
  for (; *s; s++)
    n += *s == '\n';
  return n;
}

/* The local reference run of a study file (folder `loc`). */
static void local_reference(const char *method, int samples, const char *mode) {
  write_study("loc.yaml", "loc", method, samples, mode, "");
  cr_assert_eq(brink("run loc.yaml --quiet"), 0, "%s", read_file("err.txt"));
}

Test(cluster, mpi_three_ranks_give_the_records_of_a_local_run) {
  need_mpi();
  local_reference("lhs", 120, "slow 0.01");
  write_study("m.yaml", "m", "lhs", 120, "slow 0.01", "");
  cr_assert_eq(mpirun(3, "run --mpi --quiet m.yaml"), 0, "%s",
               read_file("err.txt"));
  char *want = canonical_records("loc");
  cr_assert_eq(count_lines(want), 120);
  cr_assert_str_eq(canonical_records("m"), want);
  cr_assert_str_eq(canonical_report("m"), canonical_report("loc"));
  /* Rank 0 records, the workers ran: one line per key, no more. */
  cr_assert_eq(sh("test $(grep -c '^lhs/' m/records.log) -eq 120"), 0);
}

/* The pid of the brink process that is MPI rank `rank`, or 0. */
static pid_t find_rank(int rank) {
  DIR *d = opendir("/proc");
  cr_assert(d);
  struct dirent *e;
  pid_t found = 0;
  char want[64];
  snprintf(want, sizeof want, "OMPI_COMM_WORLD_RANK=%d", rank);
  while (!found && (e = readdir(d))) {
    pid_t pid = (pid_t)atoi(e->d_name);
    if (pid <= 0)
      continue;
    char p[64], exe[512];
    snprintf(p, sizeof p, "/proc/%d/exe", (int)pid);
    ssize_t k = readlink(p, exe, sizeof exe - 1);
    if (k <= 0)
      continue;
    exe[k] = '\0';
    if (strcmp(exe, env("BRINK_EXE")) != 0)
      continue;
    snprintf(p, sizeof p, "/proc/%d/environ", (int)pid);
    FILE *f = fopen(p, "r");
    if (!f)
      continue;
    char buf[65536];
    size_t n = fread(buf, 1, sizeof buf - 1, f);
    fclose(f);
    buf[n] = '\0';
    int mine = 0, is_rank = 0;
    for (size_t i = 0; i < n; i += strlen(buf + i) + 1) {
      if (strcmp(buf + i, want) == 0)
        is_rank = 1;
      if (strncmp(buf + i, "BK_CLUSTER_TEST=", 16) == 0 &&
          strcmp(buf + i + 16, dir) == 0)
        mine = 1;
    }
    if (mine && is_rank)
      found = pid;
  }
  closedir(d);
  return found;
}

Test(cluster, killed_worker_rank_then_rerun_gives_identical_records) {
  need_mpi();
  local_reference("lhs", 120, "slow 0.05");
  write_study("k.yaml", "k", "lhs", 120, "slow 0.05", "");
  setenv("BK_CLUSTER_TEST", dir, 1);
  char cmd[1200];
  snprintf(cmd, sizeof cmd,
           "cd '%s' && exec mpirun -n 3 '%s' run --mpi --quiet k.yaml "
           ">bg-out.txt 2>bg-err.txt </dev/null",
           dir, env("BRINK_EXE"));
  pid_t pid = fork();
  cr_assert_geq(pid, 0);
  if (pid == 0) {
    execl("/bin/sh", "sh", "-c", cmd, (char *)NULL);
    _exit(127);
  }
  /* Wait until a part of the study is recorded, then kill rank 2. */
  pid_t victim = 0;
  for (int i = 0; i < 1500; i++) {
    char *log = read_file("k/records.log");
    if (log && count_lines(log) > 40 && (victim = find_rank(2)))
      break;
    usleep(20000);
  }
  cr_assert_gt(victim, 0, "rank 2 not found");
  kill(victim, SIGKILL);
  int st;
  waitpid(pid, &st, 0);
  cr_assert(WIFEXITED(st));
  cr_assert_neq(WEXITSTATUS(st), 0, "mpirun must fail when a rank dies");
  /* The launcher ends the surviving ranks; the coordinator stops within
   * its stop wait. */
  for (int i = 0; i < 1000 && (find_rank(0) || find_rank(1)); i++)
    usleep(20000);
  cr_assert_eq(find_rank(0), 0, "rank 0 outlived the job");
  /* Until its parent is reaped, the coordinator's pid still holds the
   * lock (host:pid), as it would for a few moments on a real node. */
  char *lock = read_file("k/records.log.lock");
  char *colon = lock ? strrchr(lock, ':') : NULL;
  if (colon) {
    char proc[64];
    snprintf(proc, sizeof proc, "/proc/%d", atoi(colon + 1));
    struct stat pst;
    for (int i = 0; i < 1000 && stat(proc, &pst) == 0; i++)
      usleep(20000);
  }
  unsetenv("BK_CLUSTER_TEST");
  int partial = count_lines(canonical_records("k"));
  cr_assert_lt(partial, 120, "the study should not have finished");
  /* The rerun (the requeued job) resumes from the records. */
  cr_assert_eq(mpirun(3, "run --mpi --quiet k.yaml"), 0, "%s",
               read_file("err.txt"));
  cr_assert_str_eq(canonical_records("k"), canonical_records("loc"));
  /* Nothing was recorded twice. */
  cr_assert_eq(sh("test $(grep -c '^lhs/' k/records.log) -eq 120"), 0);
  cr_assert_str_eq(canonical_report("k"), canonical_report("loc"));
}

Test(cluster, worker_that_cannot_run_models_is_reported) {
  need_mpi();
  write_study("w.yaml", "w", "random", 20, "ok",
              ", scratch: /proc/brink-cannot-be-here");
  int rc = mpirun(3, "run --mpi --quiet w.yaml");
  cr_assert_eq(rc, 1, "%s", read_file("err.txt"));
  char *err = read_file("err.txt");
  cr_assert(strstr(err, "cannot run models"), "%s", err);
  cr_assert(strstr(err, "/proc/brink-cannot-be-here"), "%s", err);
}

Test(cluster, scratch_run_folders_are_copied_back_when_kept) {
  need_mpi();
  cr_assert_eq(sh("mkdir scratch"), 0);
  char extra[400];
  snprintf(extra, sizeof extra, ", scratch: %s/scratch", dir);
  write_study("c.yaml", "c", "random", 60, "ok", extra);
  cr_assert_eq(mpirun(3, "run --mpi --quiet c.yaml"), 0, "%s",
               read_file("err.txt"));
  /* keep: failed (the default): the folders of failures are in c/work,
   * each named in its record, and scratch is left empty. */
  char *json = read_file("c/report.json");
  char *p = strstr(json, "\"failures\": ");
  cr_assert(p);
  int failures = atoi(p + 12);
  cr_assert_gt(failures, 0);
  cr_assert_eq(sh("test $(ls c/work | wc -l) -eq %d", failures), 0, "%s", json);
  /* The folder field of each record names its copy. */
  cr_assert_eq(sh("test $(awk -F'\\t' '$(NF-1) ~ \"^%s/c/work/mc-\"' "
                  "c/records.log | wc -l) -eq %d",
                  dir, failures),
               0, "%s", read_file("c/records.log"));
  cr_assert_eq(sh("test -z \"$(ls scratch)\""), 0);
  cr_assert_eq(sh("test -f c/work/$(ls c/work | head -1)/out.txt"), 0);
}

Test(cluster, shards_merge_into_the_local_records_and_report) {
  local_reference("sobol", 64, "ok");
  write_study("s.yaml", "s", "sobol", 64, "ok", "");
  for (int i = 0; i < 4; i++) {
    char a[64];
    snprintf(a, sizeof a, "run --shard %d/4 s.yaml", i);
    cr_assert_eq(brink(a), 0, "%s", read_file("err.txt"));
    cr_assert(strstr(read_file("out.txt"), "brink merge"));
  }
  cr_assert(!exists("s/report.json"), "a shard writes no report");
  cr_assert_eq(brink("merge s.yaml --quiet"), 0, "%s", read_file("err.txt"));
  cr_assert_str_eq(canonical_records("s"), canonical_records("loc"));
  cr_assert_str_eq(canonical_report("s"), canonical_report("loc"));
}

Test(cluster, merge_names_missing_incomplete_and_foreign_shards) {
  write_study("s.yaml", "s", "random", 30, "ok", "");
  cr_assert_eq(brink("run --shard 0/3 s.yaml --quiet"), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(brink("run --shard 2/3 s.yaml --quiet"), 0);
  cr_assert_eq(brink("merge s.yaml"), 1);
  char *err = read_file("err.txt");
  cr_assert(strstr(err, "1 of 3 shards are missing (no log yet): 1"), "%s",
            err);
  cr_assert(!exists("s/records.log"));
  /* Shard 1 with only its first three evaluations. */
  cr_assert_eq(brink("run --shard 1/3 s.yaml --quiet"), 0);
  cr_assert_eq(sh("f=s/records-shard-1-of-3.log; n=$(grep -c '^#' $f); "
                  "head -n $((n + 4)) $f > t && mv t $f"),
               0);
  cr_assert_eq(brink("merge s.yaml"), 1);
  err = read_file("err.txt");
  cr_assert(strstr(err, "shard 1/3: 7 of its evaluations are not recorded "
                        "(first: mc/"),
            "%s", err);
  cr_assert(strstr(err, "brink run --shard 1/3 s.yaml"), "%s", err);
  cr_assert(!exists("s/records.log"));
  /* A changed deck: the shard logs belong to another study. */
  cr_assert_eq(brink("run --shard 1/3 s.yaml --quiet"), 0);
  write_file("deck.txt", "x1 = {{ a }}\nx2 = {{ b }}\nbeta = 1.6\n");
  cr_assert_eq(brink("merge s.yaml"), 2);
  err = read_file("err.txt");
  cr_assert(strstr(err, "deck.txt"), "%s", err);
  cr_assert(strstr(err, "cannot be merged"), "%s", err);
}

Test(cluster, adaptive_methods_refuse_shards) {
  write_study("s.yaml", "s", "random", 30, "ok", "");
  char *t = read_file("s.yaml");
  char *at = strstr(t, "method: random, samples: 30");
  cr_assert(at);
  write_file("f.yaml", "%.*smethod: form%s", (int)(at - t), t,
             at + strlen("method: random, samples: 30"));
  cr_assert_eq(brink("run --shard 0/2 f.yaml"), 2);
  char *err = read_file("err.txt");
  cr_assert(strstr(err, "sampling methods"), "%s", err);
  cr_assert(!exists("s/records-shard-0-of-2.log"));
  cr_assert_eq(brink("run --shard 2/2 s.yaml"), 2);
  cr_assert_eq(brink("run --mpi --shard 0/2 s.yaml"), 2);
  cr_assert_eq(brink("submit f.yaml --scheduler slurm --mode array"), 2);
}

/* ---- job scripts ------------------------------------------------------ */

static void assert_has(const char *text, const char *what) {
  cr_assert(strstr(text, what), "'%s' missing from\n%s", what, text);
}

Test(cluster, rendered_pbs_scripts_hold_resources_stop_and_resubmit) {
  write_study("p.yaml", "p", "lhs", 40, "ok", "");
  cr_assert_eq(brink("submit p.yaml --scheduler pbs --ranks 3 --time "
                     "02:00:00 --signal-lead 300 --queue short --account "
                     "proj7 --memory 4gb"),
               0, "%s", read_file("err.txt"));
  char *s = read_file("p/job-pbs-mpi.sh");
  cr_assert(s);
  cr_assert_str_eq(read_file("out.txt"), s, "printed as written");
  assert_has(s, "#!/bin/bash\n");
  assert_has(s, "#PBS -N brink-p\n");
  assert_has(s, "#PBS -l select=3:ncpus=2:mpiprocs=1\n");
  assert_has(s, "#PBS -l walltime=2:00:00\n");
  assert_has(s, "#PBS -l mem=4gb\n");
  assert_has(s, "#PBS -q short\n");
  assert_has(s, "#PBS -A proj7\n");
  assert_has(s, "#PBS -r y\n");
  assert_has(s, "(sleep 6900 && kill -USR1 $$) &");
  assert_has(s, "mpirun \"$brink\" run --mpi --quiet \"$study\" &");
  assert_has(s, "[ \"$rc\" -eq 3 ]");
  assert_has(s, "qsub -v BRINK_ROUND=$((round + 1))");
  assert_has(s, "/p/job-pbs-mpi.sh");
  assert_has(s, "# module load");
  cr_assert(!strstr(s, "{{"), "%s", s);
  cr_assert_eq(sh("bash -n p/job-pbs-mpi.sh"), 0);

  cr_assert_eq(brink("submit p.yaml --scheduler pbs --mode array --tasks 4 "
                     "--time 1-00:00:00"),
               0, "%s", read_file("err.txt"));
  s = read_file("p/job-pbs-array.sh");
  assert_has(s, "#PBS -J 0-3\n");
  assert_has(s, "#PBS -l select=1:ncpus=2\n");
  assert_has(s, "#PBS -l walltime=24:00:00\n");
  assert_has(s, "shard=\"$index/4\"");
  assert_has(s, "run --shard \"$shard\"");
  assert_has(s, "(sleep 86280 && kill -USR1 $$) &");
  assert_has(s, "sed '/^#PBS -J/d'");
  assert_has(s, "brink merge ");
  /* Options not given leave no directive behind. */
  cr_assert(!strstr(s, "#PBS -q"), "%s", s);
  cr_assert(!strstr(s, "#PBS -A"), "%s", s);
  cr_assert(!strstr(s, "#PBS -l mem"), "%s", s);
  cr_assert_eq(sh("bash -n p/job-pbs-array.sh"), 0);
}

Test(cluster, rendered_slurm_scripts_hold_resources_stop_and_requeue) {
  write_study("p.yaml", "p", "lhs", 40, "ok", "");
  cr_assert_eq(brink("submit p.yaml --scheduler slurm --ranks 5 --slots 3 "
                     "--time 00:30:00 --partition debug --launcher mpirun"),
               0, "%s", read_file("err.txt"));
  char *s = read_file("p/job-slurm-mpi.sh");
  assert_has(s, "#SBATCH --ntasks=5\n");
  assert_has(s, "#SBATCH --cpus-per-task=3\n");
  assert_has(s, "#SBATCH --time=0:30:00\n");
  assert_has(s, "#SBATCH --partition=debug\n");
  assert_has(s, "#SBATCH --signal=B:USR1@120\n");
  assert_has(s, "#SBATCH --requeue\n");
  assert_has(s, "mpirun \"$brink\" run --mpi");
  assert_has(s, "scontrol requeue \"$SLURM_JOB_ID\"");
  cr_assert(!strstr(s, "--account"), "%s", s);
  cr_assert_eq(sh("bash -n p/job-slurm-mpi.sh"), 0);
  cr_assert_eq(brink("submit p.yaml --scheduler slurm --mode array --tasks "
                     "6"),
               0);
  s = read_file("p/job-slurm-array.sh");
  assert_has(s, "#SBATCH --array=0-5\n");
  assert_has(s, "shard=\"${SLURM_ARRAY_TASK_ID}/6\"");
  cr_assert_eq(sh("bash -n p/job-slurm-array.sh"), 0);
  /* Bad options are refused before anything is written. */
  cr_assert_eq(brink("submit p.yaml --scheduler lsf"), 2);
  cr_assert_eq(brink("submit p.yaml --scheduler slurm --time 90"), 2);
  cr_assert_eq(brink("submit p.yaml --scheduler slurm --ranks 1"), 2);
  cr_assert_eq(brink("submit p.yaml --scheduler slurm --time 00:01:00 "
                     "--signal-lead 60"),
               2);
}

/* ---- Slurm -------------------------------------------------------------- */

static void need_slurm(void) {
  need_mpi();
  if (!have("sbatch") || geteuid() != 0)
    cr_skip_test("Slurm (slurm-wlm) is not installed or not root");
  char cmd[600];
  snprintf(cmd, sizeof cmd, "'%s/tests/cluster/start-slurm.sh' >&2",
           env("BRINK_SOURCE_ROOT"));
  cr_assert_eq(system(cmd), 0, "start-slurm.sh failed");
}

/* The state of a Slurm job (or "GONE"). */
static void job_state(const char *id, char *out, size_t cap) {
  char cmd[256];
  snprintf(cmd, sizeof cmd,
           "scontrol show job %s 2>/dev/null | grep -o 'JobState=[A-Z_]*' "
           "| cut -d= -f2 | sort -u | tr '\\n' ' '",
           id);
  FILE *p = popen(cmd, "r");
  cr_assert(p);
  if (!fgets(out, (int)cap, p))
    snprintf(out, cap, "GONE");
  pclose(p);
}

static int is_final(const char *st) {
  return strstr(st, "PENDING") == NULL && strstr(st, "RUNNING") == NULL &&
         strstr(st, "COMPLETING") == NULL &&
         strstr(st, "CONFIGURING") == NULL && strstr(st, "REQUEUE") == NULL;
}

/* Waits for the job (all its array tasks) to end; a requeued job waiting
 * for its begin time is started after 2 s. (Not at once: slurmd refuses a
 * batch job started in the same second as its requeue, "Job credential
 * revoked", and the job ends FAILED.) Returns the final states. */
static void wait_job(const char *id, char *st, size_t cap) {
  int pending = 0;
  for (int i = 0; i < 3000; i++) {
    job_state(id, st, cap);
    if (is_final(st))
      return;
    pending = strstr(st, "PENDING") ? pending + 1 : 0;
    if (pending >= 10)
      sh("scontrol update JobId=%s StartTime=now >/dev/null 2>&1 || true", id);
    usleep(200000);
  }
  cr_assert_fail("job %s did not end: %s", id, st);
}

static void submit_go(const char *args, char *id, size_t cap) {
  char a[512];
  snprintf(a, sizeof a, "submit %s --go", args);
  cr_assert_eq(brink(a), 0, "%s", read_file("err.txt"));
  snprintf(id, cap, "%s", read_file("out.txt"));
  id[strcspn(id, "\n")] = '\0';
  cr_assert(id[0] >= '0' && id[0] <= '9', "job id '%s'", id);
}

Test(cluster, slurm_mpi_job_and_array_match_the_local_report) {
  need_slurm();
  local_reference("lhs", 80, "ok");
  write_study("m.yaml", "m", "lhs", 80, "ok", "");
  write_study("a.yaml", "a", "lhs", 80, "ok", "");
  char jm[64], ja[64], st[256];
  submit_go("m.yaml --scheduler slurm --ranks 3 --slots 1 --time 00:10:00", jm,
            sizeof jm);
  submit_go("a.yaml --scheduler slurm --mode array --tasks 4 --slots 1 "
            "--time 00:10:00",
            ja, sizeof ja);
  wait_job(jm, st, sizeof st);
  cr_assert_str_eq(st, "COMPLETED ", "MPI job: %s\n%s", st,
                   read_file("m/job-slurm-mpi.sh"));
  wait_job(ja, st, sizeof st);
  cr_assert_str_eq(st, "COMPLETED ", "array job: %s", st);
  cr_assert_str_eq(canonical_records("m"), canonical_records("loc"));
  cr_assert_str_eq(canonical_report("m"), canonical_report("loc"));
  for (int i = 0; i < 4; i++) {
    char name[64];
    snprintf(name, sizeof name, "a/records-shard-%d-of-4.log", i);
    cr_assert(exists(name), "%s", name);
  }
  cr_assert_eq(brink("merge a.yaml --quiet"), 0, "%s", read_file("err.txt"));
  cr_assert_str_eq(canonical_records("a"), canonical_records("loc"));
  cr_assert_str_eq(canonical_report("a"), canonical_report("loc"));
}

Test(cluster, slurm_job_stopped_before_its_limit_is_requeued_and_completes) {
  need_slurm();
  local_reference("lhs", 120, "slow 0.1");
  write_study("q.yaml", "q", "lhs", 120, "slow 0.1", "");
  char id[64], st[256];
  submit_go("q.yaml --scheduler slurm --ranks 3 --slots 1 --time 00:10:00", id,
            sizeof id);
  /* The pre-timeout signal, sent now rather than 120 s before the limit. */
  for (int i = 0; i < 3000; i++) {
    char *log = read_file("q/records.log");
    if (log && count_lines(log) > 20)
      break;
    usleep(20000);
  }
  cr_assert_eq(sh("scancel --batch --signal=USR1 %s", id), 0);
  wait_job(id, st, sizeof st);
  cr_assert_str_eq(st, "COMPLETED ", "%s", st);
  char name[128];
  snprintf(name, sizeof name, "q/slurm-%s.out", id);
  char *out = read_file(name);
  cr_assert(out, "%s", name);
  assert_has(out, "brink: exit status 3");
  assert_has(out, "requeueing to resume");
  assert_has(out, "restart 1");
  assert_has(out, "brink: exit status 0");
  cr_assert_str_eq(canonical_records("q"), canonical_records("loc"));
  cr_assert_eq(sh("test $(grep -c '^lhs/' q/records.log) -eq 120"), 0);
  cr_assert_str_eq(canonical_report("q"), canonical_report("loc"));
}

/* ---- models of several threads or ranks ------------------------------ */

/* Skips unless the MPI test program was built (meson found MPI). */
static const char *need_mpisum(void) {
  need_mpi();
  const char *p = getenv("BRINK_TEST_MPISUM");
  if (!p || !*p || access(p, X_OK) != 0)
    cr_skip_test("bk-test-mpisum was not built (MPI not found by meson)");
  return p;
}

/* A study of two standard normal inputs whose model is the MPI test
 * program on `ranks` ranks: g = 1.5 - (a + b)/sqrt(2), printed by rank 0
 * when every rank took part. `command` is the model.command list, `run`
 * more keys of the run section. */
static void write_mpi_study(const char *name, const char *folder, int ranks,
                            const char *command, const char *model_extra,
                            const char *run) {
  write_file("mdeck.txt", "# {{ _key }}: {{ _ranks }} ranks x {{ _threads }} "
                          "threads = {{ _cores }} cores on {{ _hosts }}\n"
                          "x1 = {{ a : %%.17g }}\n"
                          "x2 = {{ b : %%.17g }}\n"
                          "beta = 1.5\n");
  write_file(name,
             "name: %s\n"
             "seed: 91\n"
             "variables:\n"
             "  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n"
             "model:\n"
             "  files: [{template: mdeck.txt, to: in.txt}]\n"
             "  command: %s\n"
             "  timeout: 120\n"
             "  keep: all\n"
             "%s"
             "  outputs:\n"
             "    g: {stdout: true, pattern: 'result: g = (\\S+)'}\n"
             "limit_state: g\n"
             "analysis: {method: lhs, samples: 8, replicates: 2}\n"
             "run: {folder: %s, ranks: %d%s}\n",
             folder, command, model_extra, folder, ranks, run);
}

/* model.command running the test program under its own mpirun. */
/* OpenMPI 4.1 keeps its session folders in /tmp/ompi.HOST.UID, which each
 * mpirun removes when it ends: one starting at that moment fails ("A
 * call to mkdir was unable to create the desired directory ... File
 * exists", exit 1). Concurrent runs each take their run folder as the
 * base of theirs (docs/cluster.md). */
static void mpirun_command(char *out, size_t cap, const char *np) {
  snprintf(out, cap,
           "[sh, -c, 'exec mpirun --mca orte_tmpdir_base \"$BRINK_FOLDER\" "
           "-np \"$1\" --host \"$2\" \"$3\" \"$4\" in.txt', sh, '%s', "
           "'{{ _hosts }}', '%s', '{{ _ranks }}']",
           np, need_mpisum());
}

/* What the runs of `folder` printed on stderr (for failure messages). */
static char *run_errors(const char *folder) {
  sh("for f in %s/work/*/stderr; do [ -s \"$f\" ] && "
     "{ echo \"== $f\"; head -c 1500 \"$f\"; }; done > %s.errs; true",
     folder, folder);
  char name[300];
  snprintf(name, sizeof name, "%s.errs", folder);
  char *t = read_file(name);
  return t ? t : "";
}

/* The records of the single-rank run (folder one), the reference. */
static char *single_rank_reference(void) {
  char cmd[1024];
  mpirun_command(cmd, sizeof cmd, "{{ _ranks }}");
  write_mpi_study("one.yaml", "one", 1, cmd,
                  "  inherit: ['OMPI_ALLOW_RUN_AS_ROOT*']\n", ", slots: 2");
  cr_assert_eq(brink("run one.yaml --quiet"), 0, "%s\n%s", read_file("err.txt"),
               run_errors("one"));
  char *want = canonical_records("one");
  cr_assert_eq(count_lines(want), 8);
  return want;
}

Test(cluster, mpi_model_of_two_ranks_locally_gives_the_single_rank_records) {
  char *want = single_rank_reference();
  char cmd[1024];
  mpirun_command(cmd, sizeof cmd, "{{ _ranks }}");
  write_mpi_study("two.yaml", "two", 2, cmd,
                  "  inherit: ['OMPI_ALLOW_RUN_AS_ROOT*']\n", "");
  cr_assert_eq(brink("run two.yaml --quiet"), 0, "%s\n%s", read_file("err.txt"),
               run_errors("two"));
  cr_assert_str_eq(canonical_records("two"), want);
  /* Each run saw two ranks (0 + 1 = 1), and its deck the resources. */
  char *out = read_file("two/work/lhs-r0-0/stdout");
  cr_assert(out && strstr(out, "ranks: 2\nsum: 1\n"), "%s", out ? out : "");
  char *deck = read_file("two/work/lhs-r0-0/in.txt");
  cr_assert(deck && strstr(deck, ": 2 ranks x 1 threads = 2 cores on "), "%s",
            deck ? deck : "");
  cr_assert(strstr(deck, ":2\n"), "the host list gives 2 slots: %s", deck);
}

Test(cluster, mpi_model_launches_its_own_ranks_under_brink_run_mpi) {
  char *want = single_rank_reference();
  char cmd[1024];
  mpirun_command(cmd, sizeof cmd, "{{ _ranks }}");
  write_mpi_study("nest.yaml", "nest", 2, cmd,
                  "  inherit: ['OMPI_ALLOW_RUN_AS_ROOT*']\n", "");
  cr_assert_eq(mpirun(2, "run --mpi --quiet nest.yaml"), 0, "%s\n%s",
               read_file("err.txt"), run_errors("nest"));
  cr_assert_str_eq(canonical_records("nest"), want);
  char *out = read_file("nest/work/lhs-r1-3/stdout");
  cr_assert(out && strstr(out, "ranks: 2\nsum: 1\n"), "%s", out ? out : "");
}

Test(cluster, launcher_variables_passed_on_make_model_errors_not_values) {
  /* With brink's own launcher variables passed on (model.inherit), the
   * model's mpirun cannot start its ranks under brink run --mpi: each
   * run is a model error with a reason, never a value. */
  char cmd[1024];
  mpirun_command(cmd, sizeof cmd, "{{ _ranks }}");
  write_mpi_study("leak.yaml", "leak", 2, cmd,
                  "  inherit: ['OMPI_*', 'PMIX_*']\n  on_error: fail\n", "");
  cr_assert_eq(mpirun(2, "run --mpi --quiet leak.yaml"), 1, "%s",
               read_file("err.txt"));
  assert_has(read_file("err.txt"), "model runs failed");
  char *recs = canonical_records("leak");
  cr_assert(!strstr(recs, "\tok\t"), "no run may succeed: %s", recs);
  cr_assert_eq(count_lines(recs), 8, "%s", recs);
}

Test(cluster, model_given_fewer_ranks_than_asked_is_a_model_error) {
  char cmd[1024];
  mpirun_command(cmd, sizeof cmd, "1");
  write_mpi_study("few.yaml", "few", 2, cmd,
                  "  inherit: ['OMPI_ALLOW_RUN_AS_ROOT*']\n  on_error: fail\n",
                  "");
  /* Every run fails: the run stops on model.max_error_fraction. */
  cr_assert_eq(brink("run few.yaml --quiet"), 1, "%s", read_file("err.txt"));
  assert_has(read_file("err.txt"), "8 of 8 model runs failed");
  char *recs = canonical_records("few");
  cr_assert_eq(count_lines(recs), 8, "%s", recs);
  cr_assert(!strstr(recs, "\tok\t"), "%s", recs);
  cr_assert(strstr(recs, "exit status"), "the reason names the exit: %s", recs);
  char *err = read_file("few/work/lhs-r0-0/stderr");
  cr_assert(err && strstr(err, "1 ranks (sum 0), asked for 2"), "%s",
            err ? err : "");
}

Test(cluster, threaded_model_sees_its_threads_and_a_clean_environment) {
  write_file(
      "t.sh",
      "echo \"omp: $OMP_NUM_THREADS\"\n"
      "echo \"arg: $1 $2\"\n"
      "echo \"brink: $BRINK_THREADS $BRINK_RANKS $BRINK_CORES\"\n"
      "echo \"perturb: ${MALLOC_PERTURB_-none}\"\n"
      "echo \"ompi: ${OMPI_COMM_WORLD_RANK-none} "
      "${OMPI_MCA_keep_me-none}\"\n"
      "echo \"pmix: ${PMIX_RANK-none} slurm: ${SLURM_PROCID-none}\"\n"
      "echo \"blas: ${OPENBLAS_NUM_THREADS-none} ${MKL_NUM_THREADS-x}\"\n"
      "echo \"result: g = $OMP_NUM_THREADS\"\n");
  write_file("tdeck.txt", "threads {{ _threads }} cores {{ _cores }}\n");
  write_file("t.yaml",
             "name: t\n"
             "variables:\n"
             "  a: {type: normal, mean: 0, sd: 1}\n"
             "model:\n"
             "  files: [{template: tdeck.txt, to: deck.txt}]\n"
             "  copy: [t.sh]\n"
             "  command: [sh, t.sh, '{{ _threads }}', 'c={{_cores}}']\n"
             "  env: {MKL_NUM_THREADS: '1'}\n"
             "  inherit: ['OMPI_MCA_keep*']\n"
             "  keep: all\n"
             "  outputs:\n"
             "    t: {stdout: true, pattern: 'result: g = (\\S+)'}\n"
             "limit_state: t - a\n"
             "analysis: {method: random, samples: 2}\n"
             "run: {folder: t, threads: 3}\n");
  cr_assert_eq(sh("MALLOC_PERTURB_=77 OMP_NUM_THREADS=9 OMPI_COMM_WORLD_RANK=1 "
                  "OMPI_MCA_keep_me=yes PMIX_RANK=1 SLURM_PROCID=4 "
                  "'%s' run t.yaml --quiet >out.txt 2>err.txt",
                  env("BRINK_EXE")),
               0, "%s", read_file("err.txt"));
  char *out = read_file("t/work/mc-0/stdout");
  cr_assert(out, "no stdout");
  assert_has(out, "omp: 3\n");
  assert_has(out, "arg: 3 c=3\n");
  assert_has(out, "brink: 3 1 3\n");
  assert_has(out, "perturb: none\n");
  assert_has(out, "ompi: none yes\n");
  assert_has(out, "pmix: none slurm: none\n");
  assert_has(out, "blas: 3 1\n");
  char *deck = read_file("t/work/mc-0/deck.txt");
  cr_assert_str_eq(deck, "threads 3 cores 3\n");
  /* One run takes 3 cores: the default slots are the machine's cores
   * over 3, at least 1. */
  cr_assert_eq(brink("check t.yaml"), 0, "%s", read_file("err.txt"));
  assert_has(read_file("out.txt"), "3 cores per run");
}

Test(cluster, slurm_steps_job_gives_the_single_rank_records) {
  need_slurm();
  char *want = single_rank_reference();
  char cmd[1024];
  snprintf(cmd, sizeof cmd, "['%s', '{{ _ranks }}', in.txt]", need_mpisum());
  write_mpi_study("st.yaml", "st", 2, cmd, "  env: {SLURM_MPI_TYPE: pmix}\n",
                  ", launch: srun");
  /* Outside an allocation, a clear refusal. */
  cr_assert_eq(sh("env -u SLURM_JOB_ID '%s' run st.yaml --quiet >out.txt "
                  "2>err.txt",
                  env("BRINK_EXE")),
               2);
  assert_has(read_file("err.txt"), "SLURM_JOB_ID is not set");
  char id[64], st[256];
  submit_go("st.yaml --scheduler slurm --mode steps --slots 2 "
            "--time 00:10:00",
            id, sizeof id);
  char *script = read_file("st/job-slurm-steps.sh");
  assert_has(script, "#SBATCH --ntasks=4\n");
  assert_has(script, "#SBATCH --cpus-per-task=1\n");
  wait_job(id, st, sizeof st);
  char name[128];
  snprintf(name, sizeof name, "st/slurm-%s.out", id);
  cr_assert_str_eq(st, "COMPLETED ", "%s\n%s", st, read_file(name));
  cr_assert_str_eq(canonical_records("st"), want);
  char *out = read_file("st/work/lhs-r0-0/stdout");
  cr_assert(out && strstr(out, "ranks: 2\nsum: 1\n"), "%s", out ? out : "");
}

Test(cluster, host_list_is_split_between_concurrent_runs) {
  /* A PBS job's host list (a line per MPI process), split into chunks of
   * run.ranks lines: at most one run per chunk at a time. Each run holds
   * a lock named by its hosts while it runs; a second run on the same
   * chunk would find it taken and fail. */
  write_file("nodes", "nA\nnA\nnB\nnC\n");
  write_file("hdeck", "{{ _hosts }}\n");
  cr_assert_eq(sh("mkdir locks"), 0);
  write_file("h.sh", "d=\"$LOCKS/$(echo \"$1\" | tr ':,' '__')\"\n"
                     "mkdir \"$d\" 2>/dev/null || "
                     "{ echo \"clash on $1\" >&2; exit 5; }\n"
                     "echo \"hosts: $BRINK_HOSTS arg: $1 deck: $(cat "
                     "deck)\"\n"
                     "sleep 0.2\n"
                     "rmdir \"$d\"\n"
                     "echo \"result: g = 1\"\n");
  write_file("h.yaml",
             "name: h\n"
             "variables:\n"
             "  a: {type: normal, mean: 0, sd: 1}\n"
             "model:\n"
             "  files: [{template: hdeck, to: deck}]\n"
             "  copy: [h.sh]\n"
             "  command: [sh, h.sh, '{{ _hosts }}']\n"
             "  env: {LOCKS: '%s/locks'}\n"
             "  keep: all\n"
             "  outputs:\n"
             "    g: {stdout: true, pattern: 'result: g = (\\S+)'}\n"
             "limit_state: g - a\n"
             "analysis: {method: random, samples: 8}\n"
             "run: {folder: h, ranks: 2}\n",
             dir);
  /* Four lines, two ranks per run: two runs at a time. */
  cr_assert_eq(sh("PBS_NODEFILE=nodes '%s' check h.yaml >out.txt 2>err.txt",
                  env("BRINK_EXE")),
               0, "%s", read_file("err.txt"));
  assert_has(read_file("out.txt"), "2 runs at a time, 2 cores per run");
  cr_assert_eq(sh("PBS_NODEFILE=nodes '%s' run h.yaml --quiet >out.txt "
                  "2>err.txt",
                  env("BRINK_EXE")),
               0, "%s", read_file("err.txt"));
  cr_assert_eq(sh("cat h/work/*/stdout | grep '^hosts:' | sort -u "
                  ">hosts.txt"),
               0);
  cr_assert_str_eq(read_file("hosts.txt"),
                   "hosts: nA:2 arg: nA:2 deck: nA:2\n"
                   "hosts: nB:1,nC:1 arg: nB:1,nC:1 deck: nB:1,nC:1\n");
  /* A host list that cannot be read is named. */
  cr_assert_eq(sh("PBS_NODEFILE=missing '%s' run h.yaml --quiet >out.txt "
                  "2>err.txt",
                  env("BRINK_EXE")),
               1);
  assert_has(read_file("err.txt"), "host list missing");
}

Test(cluster, rendered_scripts_request_the_cores_of_each_run) {
  /* 3 threads x 2 ranks per run: 6 cores a run. */
  write_study("c.yaml", "c", "lhs", 40, "ok", ", threads: 3, ranks: 2");
  cr_assert_eq(brink("submit c.yaml --scheduler slurm --ranks 3 --slots 2"), 0,
               "%s", read_file("err.txt"));
  char *s = read_file("c/job-slurm-mpi.sh");
  assert_has(s, "#SBATCH --ntasks=3\n");
  assert_has(s, "#SBATCH --cpus-per-task=12\n");
  assert_has(s, "2 model run(s) of 6 core(s) at a time");
  cr_assert_eq(brink("submit c.yaml --scheduler pbs --mode array --slots 1"),
               0);
  assert_has(read_file("c/job-pbs-array.sh"), "#PBS -l select=1:ncpus=6\n");
  /* Job steps need run.launch: srun on Slurm, direct on PBS. */
  cr_assert_eq(brink("submit c.yaml --scheduler slurm --mode steps"), 2);
  assert_has(read_file("err.txt"), "needs run.launch: srun");
  cr_assert_eq(brink("submit c.yaml --scheduler pbs --mode steps --slots 4 "
                     "--time 00:20:00"),
               0, "%s", read_file("err.txt"));
  s = read_file("c/job-pbs-steps.sh");
  assert_has(s, "#PBS -l select=4:ncpus=6:mpiprocs=2\n");
  assert_has(s, "\"$brink\" run --quiet \"$study\" &");
  assert_has(s, "qsub -v BRINK_ROUND=$((round + 1))");
  cr_assert(!strstr(s, "{{") && !strstr(s, "--mpi"), "%s", s);
  cr_assert_eq(sh("bash -n c/job-pbs-steps.sh"), 0);
  write_study("d.yaml", "d", "lhs", 40, "ok",
              ", threads: 3, ranks: 2, launch: srun");
  cr_assert_eq(brink("submit d.yaml --scheduler slurm --mode steps --slots 4 "
                     "--time 00:20:00"),
               0, "%s", read_file("err.txt"));
  s = read_file("d/job-slurm-steps.sh");
  assert_has(s, "#SBATCH --ntasks=8\n");
  assert_has(s, "#SBATCH --cpus-per-task=3\n");
  assert_has(s, "\"$brink\" run --quiet \"$study\" &");
  assert_has(s, "scontrol requeue \"$SLURM_JOB_ID\"");
  cr_assert(!strstr(s, "{{") && !strstr(s, "--mpi"), "%s", s);
  cr_assert_eq(sh("bash -n d/job-slurm-steps.sh"), 0);
  cr_assert_eq(brink("submit d.yaml --scheduler pbs --mode steps"), 2);
  /* run.launch: srun with --mpi: refused, with the reason. */
  cr_assert_eq(brink("run d.yaml --mpi --quiet"), 2);
  assert_has(read_file("err.txt"), "run it without --mpi");
}

Test(cluster, slurm_steps_job_stopped_before_its_limit_resumes_and_completes) {
  need_slurm();
  char *want = single_rank_reference();
  char cmd[1024];
  snprintf(cmd, sizeof cmd,
           "[sh, -c, 'sleep 1; exec \"$0\" {{ _ranks }} in.txt', '%s']",
           need_mpisum());
  write_mpi_study("sq.yaml", "sq", 2, cmd, "  env: {SLURM_MPI_TYPE: pmix}\n",
                  ", launch: srun");
  char id[64], st[256];
  submit_go("sq.yaml --scheduler slurm --mode steps --slots 2 "
            "--time 00:10:00",
            id, sizeof id);
  /* The pre-timeout signal once a few runs are recorded: the running
   * steps end, brink exits 3, the job requeues and resumes. */
  for (int i = 0; i < 3000; i++) {
    char *log = read_file("sq/records.log");
    if (log && strstr(log, "\nlhs/"))
      break;
    usleep(20000);
  }
  cr_assert_eq(sh("scancel --batch --signal=USR1 %s", id), 0);
  wait_job(id, st, sizeof st);
  char name[128];
  snprintf(name, sizeof name, "sq/slurm-%s.out", id);
  char *out = read_file(name);
  cr_assert_str_eq(st, "COMPLETED ", "%s\n%s", st, out ? out : "");
  assert_has(out, "brink: exit status 3");
  assert_has(out, "requeueing to resume");
  assert_has(out, "brink: exit status 0");
  cr_assert_str_eq(canonical_records("sq"), want);
  cr_assert_eq(sh("test $(grep -c '^lhs/' sq/records.log) -eq 8"), 0);
}
