/*
 * Integration tests of the everyday commands: report (--json, --html),
 * export (--csv, --json-lines), status (while a run is in progress),
 * check --try (a model that works, one that fails, a pattern that does not
 * match) and init. The outputs are read back with independent parsers
 * (Python's json, csv and xml.etree, in tests/helpers/check_report.py) and
 * compared with the records; the HTML report is rendered by a headless
 * Chromium when one is installed.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "eval/records.h"

static char dir[256];

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-commands-XXXXXX");
  cr_assert(mkdtemp(dir));
}

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(commands, .init = setup, .fini = teardown);

static const char *env(const char *name) {
  const char *e = getenv(name);
  cr_assert(e, "%s must be set", name);
  return e;
}

static void write_file(const char *name, const char *fmt, ...) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "w");
  cr_assert(f);
  va_list ap;
  va_start(ap, fmt);
  vfprintf(f, fmt, ap);
  va_end(ap);
  fclose(f);
}

/* The whole file in a static buffer (NULL when absent). */
static char *read_file(const char *name) {
  static char buf[1 << 20];
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "r");
  if (!f)
    return NULL;
  size_t n = fread(buf, 1, sizeof buf - 1, f);
  buf[n] = '\0';
  fclose(f);
  return buf;
}

static int sh(const char *fmt, ...) {
  char cmd[4096];
  int n = snprintf(cmd, sizeof cmd, "cd '%s' && ", dir);
  va_list ap;
  va_start(ap, fmt);
  vsnprintf(cmd + n, sizeof cmd - (size_t)n, fmt, ap);
  va_end(ap);
  int st = system(cmd);
  cr_assert(WIFEXITED(st));
  return WEXITSTATUS(st);
}

static int brink(const char *args) {
  /* Scratch folders of check --try go below the test folder. */
  return sh("TMPDIR=\"$PWD\" '%s' %s >out.txt 2>err.txt </dev/null",
            env("BRINK_EXE"), args);
}

/* Two standard normal inputs through the test model: g = 1.5 - (a+b)/sqrt 2
 * (Pf = Phi(-1.5) = 0.0668, Cornell 1969), with `mode` (e.g. chaos 0.15:
 * a deterministic share of the runs crash, hang or print garbage). */
static void write_model_study(const char *mode, const char *analysis,
                              const char *extra) {
  write_file("deck.txt", "# evaluation {{ _key }}\n"
                         "x1 = {{ a : %%.17g }}\n"
                         "x2 = {{ b : %%.17g }}\n"
                         "beta = 1.5\n");
  write_file("study.yaml",
             "name: linear\n"
             "seed: 5\n"
             "variables:\n"
             "  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n"
             "model:\n"
             "  files: [{template: deck.txt, to: in.txt}]\n"
             "  command: ['%s', in.txt]\n"
             "  env: {BK_MODEL_MODE: '%s'}\n"
             "  timeout: 1\n"
             "  retries: 0\n"
             "  max_error_fraction: 0.6\n"
             "  outputs:\n"
             "    g: {file: out.txt, pattern: 'result: g = (\\S+)'}\n"
             "    total: {stdout: true, pattern: 'result: sum = (\\S+)'}\n"
             "  keep: errors\n"
             "%s"
             "limit_state: g\n"
             "analysis: {%s}\n"
             "run: {folder: out/linear, slots: 2}\n",
             env("BRINK_TEST_MODEL"), mode, extra, analysis);
}

static const char *checker(void) {
  static char p[600];
  snprintf(p, sizeof p, "%s/tests/helpers/check_report.py",
           env("BRINK_SOURCE_ROOT"));
  return p;
}

static int have_python(void) {
  return access("/usr/bin/python3", X_OK) == 0;
}

Test(commands, json_csv_and_html_agree_with_the_records) {
  write_model_study("chaos 0.15", "method: lhs, samples: 90, replicates: 3",
                    "");
  cr_assert_eq(brink("run study.yaml -q"), 0, "%s", read_file("err.txt"));
  cr_assert_eq(brink("report out/linear --json"), 0);
  cr_assert(strstr(read_file("out.txt"), "\"model_errors\""));
  cr_assert_eq(brink("export out/linear --csv -o e.csv"), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(brink("export study.yaml --json-lines -o e.jsonl"), 0);
  cr_assert_eq(brink("report out/linear --html r.html"), 0, "%s",
               read_file("err.txt"));

  /* The CSV against the records, value by value (read through the records
   * module, an independent path from export's). */
  char lp[600];
  snprintf(lp, sizeof lp, "%s/out/linear/records.log", dir);
  bk_records_opts_t ro = {.path = lp, .read_only = 1, .any_study = 1};
  bk_records_t *rec;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_records_open(&rec, &ro, &err), 0);
  char *csv = read_file("e.csv");
  char *line = strchr(csv, '\n');
  cr_assert(line);
  cr_assert(strncmp(csv, "key,a,b,g,total,limit_state,failed,status", 41) == 0,
            "header: %.60s", csv);
  size_t rows = 0, errors = 0;
  for (line++; *line; rows++) {
    char key[64];
    double a, b;
    cr_assert_eq(sscanf(line, "%63[^,],%lf,%lf", key, &a, &b), 3);
    bk_record_t r;
    cr_assert(bk_records_find(rec, key, &r), "%s not recorded", key);
    cr_assert_eq(a, r.x[0]);
    cr_assert_eq(b, r.x[1]);
    if (r.fault)
      errors++;
    char *nl = strchr(line, '\n');
    cr_assert(nl);
    line = nl + 1;
  }
  cr_assert_eq(rows, bk_records_count(rec));
  cr_assert_gt(errors, 0, "the chaos model should have produced errors");
  bk_records_close(rec);

  if (!have_python())
    cr_skip_test("no /usr/bin/python3 for the independent parsers");
  cr_assert_eq(sh("/usr/bin/python3 '%s' out/linear e.csv e.jsonl r.html "
                  ">chk.txt 2>&1",
                  checker()),
               0, "%s", read_file("chk.txt"));
}

/* Export writes each number as the shortest text that reads back as the
 * recorded double: 0.3 stays 0.3 (not 0.29999999999999999), and every
 * cell reads back bit for bit (strtod against the records module). */
Test(commands, export_writes_the_shortest_digits_that_read_back) {
  write_file("s.yaml", "name: tenth\n"
                       "variables:\n"
                       "  a: {type: uniform, lower: 0, upper: 1}\n"
                       "  c: 0.3\n"
                       "model:\n"
                       "  command: [sh, -c, 'echo y = 0.3']\n"
                       "  outputs: {y: {stdout: true, pattern: 'y = (\\S+)'}}\n"
                       "limit_state: y - a\n"
                       "analysis: {method: random, samples: 20}\n"
                       "run: {folder: out/tenth, slots: 2}\n");
  cr_assert_eq(brink("run s.yaml -q"), 0, "%s", read_file("err.txt"));
  cr_assert_eq(brink("export out/tenth --csv -o e.csv"), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(brink("export out/tenth --json-lines -o e.jsonl"), 0);
  char lp[600];
  snprintf(lp, sizeof lp, "%s/out/tenth/records.log", dir);
  bk_records_opts_t ro = {.path = lp, .read_only = 1, .any_study = 1};
  bk_records_t *rec;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_records_open(&rec, &ro, &err), 0);
  char *csv = read_file("e.csv");
  cr_assert(strncmp(csv, "key,a,c,y,g,", 12) == 0, "header: %.40s", csv);
  size_t rows = 0;
  for (char *line = strchr(csv, '\n') + 1; *line; rows++) {
    char key[64], ta[40], tc[40], ty[40], tg[40];
    cr_assert_eq(sscanf(line, "%63[^,],%39[^,],%39[^,],%39[^,],%39[^,]", key,
                        ta, tc, ty, tg),
                 5, "%.80s", line);
    cr_assert_str_eq(tc, "0.3");
    cr_assert_str_eq(ty, "0.3");
    bk_record_t r;
    cr_assert(bk_records_find(rec, key, &r), "%s not recorded", key);
    cr_assert_eq(strtod(ta, NULL), r.x[0], "%s", ta);
    cr_assert_eq(strtod(tg, NULL), r.g, "%s", tg);
    line = strchr(line, '\n') + 1;
  }
  cr_assert_eq(rows, 20);
  bk_records_close(rec);
  cr_assert(strstr(read_file("e.jsonl"), "\"c\": 0.3, \"y\": 0.3,"), "%s",
            read_file("e.jsonl"));
}

/* Placeholders in model.command's arguments are rendered per evaluation
 * like a deck's: the model gets the sampled value and the key's index as
 * arguments, and echoes them back (%.17g reads back bit for bit, so
 * g = y - a is exactly 0). */
Test(commands, command_arguments_carry_the_sampled_values) {
  write_file("s.yaml",
             "name: args\n"
             "variables:\n"
             "  a: {type: normal, mean: 3, sd: 1}\n"
             "model:\n"
             "  command: [sh, -c, 'echo \"y=$1 i=$2 k=$3\"', sh,\n"
             "            '{{ a : %%.17g }}', '{{_index}}', 'key={{ _key }}']\n"
             "  outputs:\n"
             "    y: {stdout: true, pattern: 'y=(\\S+)'}\n"
             "    i: {stdout: true, pattern: 'i=(\\S+)'}\n"
             "  keep: all\n"
             "limit_state: y - a\n"
             "analysis: {method: random, samples: 12}\n"
             "run: {folder: out/args, slots: 2}\n");
  cr_assert_eq(brink("run s.yaml -q"), 0, "%s", read_file("err.txt"));
  char lp[600];
  snprintf(lp, sizeof lp, "%s/out/args/records.log", dir);
  bk_records_opts_t ro = {.path = lp, .read_only = 1, .any_study = 1};
  bk_records_t *rec;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_records_open(&rec, &ro, &err), 0);
  cr_assert_eq(bk_records_count(rec), 12);
  for (int i = 0; i < 12; i++) {
    char key[32];
    snprintf(key, sizeof key, "mc/%d", i);
    bk_record_t r;
    cr_assert(bk_records_find(rec, key, &r), "%s not recorded", key);
    cr_assert_eq(r.fault, 0, "%s: %s", key, r.reason);
    cr_assert_eq(r.y[0], r.x[0], "%s", key);
    cr_assert_eq(r.g, 0.0, "%s", key);
    cr_assert_eq(r.y[1], (double)i, "%s", key);
  }
  bk_records_close(rec);
  char *o = read_file("out/args/work/mc-7/stdout");
  cr_assert(o && strstr(o, "k=key=mc/7"), "%s", o ? o : "(no stdout)");
  /* check --try shows the command as it was run. */
  cr_assert_eq(brink("check s.yaml --try"), 0, "%s", read_file("err.txt"));
  cr_assert(strstr(read_file("out.txt"), "command     sh -c echo \"y=$1 i=$2 "
                                         "k=$3\" sh 3 0 key=try/0"),
            "%s", read_file("out.txt"));
}

Test(commands, html_of_an_in_process_study_uses_the_design_again) {
  write_file("s.yaml", "name: shelf\n"
                       "seed: 99\n"
                       "variables:\n"
                       "  load: {type: gumbel, mean: 2.0, cov: 0.25}\n"
                       "  cap:  {type: lognormal, mean: 4.0, cov: 0.1}\n"
                       "  k: 1.0\n"
                       "correlations: [[load, cap, 0.2]]\n"
                       "limit_state: cap - k*load\n"
                       "analysis: {method: lhs, samples: 40000, replicates: 4,"
                       " target_beta: 3.8}\n"
                       "run: {folder: out/shelf}\n");
  cr_assert_eq(brink("run s.yaml -q"), 0);
  cr_assert_eq(brink("report out/shelf --html r.html"), 0, "%s",
               read_file("err.txt"));
  char *h = read_file("r.html");
  cr_assert(strstr(h, "recomputed from the seed"));
  cr_assert(strstr(h, "target reliability index 3.80"));
  cr_assert(strstr(h, "Nataf"));
  /* No records: export says why. */
  cr_assert_eq(brink("export s.yaml --csv"), 2);
  cr_assert(strstr(read_file("err.txt"), "not recorded"));
  if (!have_python())
    cr_skip_test("no /usr/bin/python3 for the independent parsers");
  cr_assert_eq(sh("/usr/bin/python3 '%s' out/shelf - - r.html inproc "
                  ">chk.txt 2>&1",
                  checker()),
               0, "%s", read_file("chk.txt"));
}

Test(commands, chromium_renders_the_html_report) {
  if (access("/usr/bin/chromium", X_OK) != 0)
    cr_skip_test("no /usr/bin/chromium");
  write_model_study("ok", "method: random, samples: 60", "");
  cr_assert_eq(brink("run study.yaml -q"), 0);
  cr_assert_eq(brink("report study.yaml --html r.html"), 0);
  int rc = sh("mkdir -p profile && HOME=\"$PWD\" timeout 120 /usr/bin/chromium "
              "--headless "
              "--no-sandbox --disable-gpu --disable-quic --no-first-run "
              "--disable-background-networking --disable-component-update "
              "--disable-sync --user-data-dir=\"$PWD/profile\" "
              "--screenshot=\"$PWD/r.png\" --window-size=1200,3000 "
              "\"file://$PWD/r.html\" >chromium.txt 2>&1");
  cr_assert_eq(rc, 0, "chromium: %s", read_file("chromium.txt"));
  char p[600];
  snprintf(p, sizeof p, "%s/r.png", dir);
  FILE *f = fopen(p, "rb");
  cr_assert(f, "no screenshot");
  unsigned char sig[8];
  cr_assert_eq(fread(sig, 1, 8, f), 8);
  fseek(f, 0, SEEK_END);
  long size = ftell(f);
  fclose(f);
  cr_assert(memcmp(sig, "\x89PNG\r\n\x1a\n", 8) == 0);
  cr_assert_gt(size, 20000, "an empty page? %ld bytes", size);
}

Test(commands, status_while_a_run_is_in_progress) {
  write_model_study("slow 0.25", "method: random, samples: 24", "");
  pid_t pid = fork();
  cr_assert_geq(pid, 0);
  if (pid == 0) {
    char cmd[2048];
    snprintf(cmd, sizeof cmd,
             "cd '%s' && exec '%s' run study.yaml -q >bg.txt 2>&1 </dev/null",
             dir, env("BRINK_EXE"));
    execl("/bin/sh", "sh", "-c", cmd, (char *)NULL);
    _exit(127);
  }
  /* Wait for the first records (at most 2000 polls), then ask. */
  int seen = 0;
  for (int i = 0; i < 2000 && !seen; i++) {
    char *l = read_file("out/linear/records.log");
    if (l) {
      int lines = 0;
      for (char *c = strstr(l, "\nmc/"); c; c = strstr(c + 1, "\nmc/"))
        lines++;
      seen = lines >= 2;
    }
    if (!seen)
      usleep(20000);
  }
  cr_assert(seen, "the run wrote no records");
  cr_assert_eq(brink("status out/linear"), 0, "%s", read_file("err.txt"));
  char *out = read_file("out.txt");
  int running = strstr(out, "running (brink pid") != NULL;
  int st;
  waitpid(pid, &st, 0);
  cr_assert(WIFEXITED(st) && WEXITSTATUS(st) == 0);
  /* The run may have finished between the records and the question. */
  if (running) {
    cr_assert(strstr(out, "of 24 planned"), "%s", out);
    cr_assert(strstr(out, "failures"), "%s", out);
    cr_assert(strstr(out, "time to go"), "%s", out);
  }
  cr_assert_eq(brink("status study.yaml"), 0);
  out = read_file("out.txt");
  cr_assert(strstr(out, "finished"), "%s", out);
  cr_assert(strstr(out, "24 of 24 planned"), "%s", out);
  cr_assert(strstr(out, "model errors   0"), "%s", out);
}

/* The data lines of sessions.log: their outcomes joined by ',' into
 * `outcomes`, and the sum of their seconds. */
static int session_lines(char *outcomes, size_t cap, double *sum) {
  char *t = read_file("out/linear/sessions.log");
  cr_assert(t, "no sessions.log");
  cr_assert(strncmp(t, "# brink-sessions 1\nstart\tseconds\toutcome\t", 41) ==
                0,
            "%s", t);
  int n = 0;
  *sum = 0;
  outcomes[0] = '\0';
  for (char *l = strchr(t, '\n') + 1; (l = strchr(l, '\n')) && l[1]; n++) {
    l++;
    char when[32], outcome[16];
    double sec;
    cr_assert_eq(sscanf(l, "%31s\t%lf\t%15s", when, &sec, outcome), 3, "%s", l);
    *sum += sec;
    snprintf(outcomes + strlen(outcomes), cap - strlen(outcomes), "%s%s",
             n ? "," : "", outcome);
  }
  return n;
}

/* A JSON number of report.json. */
static double json_number(const char *name) {
  char *j = read_file("out/linear/report.json");
  char k[64];
  snprintf(k, sizeof k, "\"%s\": ", name);
  char *at = j ? strstr(j, k) : NULL;
  cr_assert(at, "no %s in report.json", name);
  return strtod(at + strlen(k), NULL);
}

/* Every session goes into sessions.log, a stopped one too, and the report
 * gives the run time over all of them as well as this session's. */
Test(commands, run_time_covers_every_session) {
  write_model_study("slow 0.05", "method: random, samples: 80", "");
  pid_t pid = fork();
  cr_assert_geq(pid, 0);
  if (pid == 0) {
    char cmd[2048];
    snprintf(cmd, sizeof cmd,
             "cd '%s' && exec '%s' run study.yaml -q >bg.txt 2>&1 </dev/null",
             dir, env("BRINK_EXE"));
    execl("/bin/sh", "sh", "-c", cmd, (char *)NULL);
    _exit(127);
  }
  int seen = 0;
  for (int i = 0; i < 2000 && !seen; i++) {
    char *l = read_file("out/linear/records.log");
    int lines = 0;
    for (char *c = l ? strstr(l, "\nmc/") : NULL; c; c = strstr(c + 1, "\nmc/"))
      lines++;
    if (!(seen = lines >= 4))
      usleep(20000);
  }
  cr_assert(seen, "the run wrote no records");
  kill(pid, SIGINT);
  int st;
  waitpid(pid, &st, 0);
  cr_assert(WIFEXITED(st) && WEXITSTATUS(st) == 3, "%s", read_file("bg.txt"));
  char outcomes[128];
  double sum;
  cr_assert_eq(session_lines(outcomes, sizeof outcomes, &sum), 1);
  cr_assert_str_eq(outcomes, "stopped");
  /* Resumed to the end, then run again once finished. */
  for (int k = 2; k <= 3; k++) {
    cr_assert_eq(brink("run study.yaml"), 0, "%s", read_file("err.txt"));
    cr_assert_eq(session_lines(outcomes, sizeof outcomes, &sum), k);
    cr_assert_str_eq(outcomes, k == 2 ? "stopped,done" : "stopped,done,done");
    cr_assert_eq(json_number("sessions"), k);
    cr_assert_eq(json_number("seconds_total"), sum);
    cr_assert_lt(json_number("seconds"), sum);
    char want[64];
    snprintf(want, sizeof want, "s in %d sessions (this one ", k);
    cr_assert(strstr(read_file("out/linear/report.txt"), want), "%s",
              read_file("out/linear/report.txt"));
  }
}

/* For a method that stops on its own evidence, status shows no plan, no
 * share of it and no time to go from max_evaluations (FORM's default is a
 * million), and the runs so far from sessions.log. */
Test(commands, status_of_an_adaptive_method_shows_no_cap_as_plan) {
  write_model_study("ok", "method: form", "");
  cr_assert_eq(brink("run study.yaml -q"), 0, "%s", read_file("err.txt"));
  cr_assert_eq(brink("status study.yaml"), 0, "%s", read_file("err.txt"));
  char *out = read_file("out.txt");
  cr_assert(strstr(out, " recorded (form stops on its own evidence; "
                        "max_evaluations 1000000)\n"),
            "%s", out);
  cr_assert(!strstr(out, "planned"), "%s", out);
  cr_assert(!strstr(out, "time to go"), "%s", out);
  cr_assert(strstr(out, "  earlier runs   1, "), "%s", out);
}

/* A sessions file that cannot be written costs a warning, not the run. */
Test(commands, an_unwritable_sessions_file_is_a_warning) {
  write_model_study("ok", "method: random, samples: 6", "");
  cr_assert_eq(sh("mkdir -p out/linear/sessions.log"), 0);
  cr_assert_eq(brink("run study.yaml -q"), 0, "%s", read_file("err.txt"));
  cr_assert(strstr(read_file("err.txt"),
                   "brink: warning: cannot add this session to "
                   "out/linear/sessions.log: "),
            "%s", read_file("err.txt"));
  cr_assert_eq(json_number("sessions"), 1);
  cr_assert(strstr(read_file("out/linear/report.txt"), "  run time  "));
}

/* A run folder whose study cannot be found: status says so plainly and
 * how to point it to the study, and shows no estimate (the method, and so
 * what failures / runs means, is unknown). */
Test(commands, status_without_the_study_says_so) {
  write_model_study("ok", "method: random, samples: 12", "");
  cr_assert_eq(brink("run study.yaml -q"), 0, "%s", read_file("err.txt"));
  cr_assert_eq(sh("mkdir -p far/a/b/c && mv out/linear far/a/b/c/run && "
                  "rm far/a/b/c/run/report.json"),
               0);
  cr_assert_eq(brink("status far/a/b/c/run"), 0, "%s", read_file("err.txt"));
  char *out = read_file("out.txt");
  cr_assert(strstr(out, "Run folder far/a/b/c/run\n"
                        "  study          not found: no report.json here "
                        "names it, and no *.yaml up to\n"
                        "                 three folders above has this run "
                        "folder; give it as\n"
                        "                 `brink status STUDY.yaml` for the "
                        "plan, the estimate and the\n"
                        "                 time to go\n"),
            "%s", out);
  cr_assert(strstr(out, "evaluations    12 recorded"), "%s", out);
  cr_assert(!strstr(out, "estimate Pf"), "%s", out);
  /* With the study, the sampling estimate is shown. */
  cr_assert_eq(sh("mv far/a/b/c/run out/linear"), 0);
  cr_assert_eq(brink("status study.yaml"), 0, "%s", read_file("err.txt"));
  out = read_file("out.txt");
  cr_assert(strstr(out, "Study linear, folder "), "%s", out);
  cr_assert(strstr(out, "running estimate Pf = "), "%s", out);
}

/* --mode array runs `brink run --shard`, which refuses a study without a
 * model section: submit refuses it first, before it writes anything. */
Test(commands, submit_array_needs_a_model_section) {
  write_file("s.yaml", "variables: {a: {type: normal, mean: 3, sd: 1}}\n"
                       "limit_state: a\n"
                       "analysis: {method: random, samples: 10}\n"
                       "run: {folder: out/s}\n");
  cr_assert_eq(brink("submit s.yaml --scheduler slurm --mode array"), 2);
  cr_assert(strstr(read_file("err.txt"),
                   "brink: submit: --mode array runs brink run --shard, "
                   "which needs a study with a model section"),
            "%s", read_file("err.txt"));
  cr_assert_neq(sh("test -e out"), 0, "a run folder was made");
}

/* submit --go reads the job id from the scheduler's first line, however
 * much the scheduler prints after it (a full pipe must not block it). */
Test(commands, submit_go_takes_the_first_line_of_a_talkative_scheduler) {
  write_model_study("ok", "method: random, samples: 10", "");
  cr_assert_eq(sh("mkdir bin && printf '#!/bin/sh\\necho \"4242;c1\"\\n"
                  "head -c 300000 /dev/zero | tr \"\\\\0\" x\\n' "
                  "> bin/sbatch && chmod +x bin/sbatch"),
               0);
  int rc = sh("PATH=\"$PWD/bin:$PATH\" '%s' submit study.yaml --scheduler "
              "slurm --go >out.txt 2>err.txt </dev/null",
              env("BRINK_EXE"));
  cr_assert_eq(rc, 0, "%s", read_file("err.txt"));
  cr_assert_str_eq(read_file("out.txt"), "4242\n");
  cr_assert(strstr(read_file("err.txt"), "as job 4242"), "%s",
            read_file("err.txt"));
}

Test(commands, check_try_with_a_model_that_works) {
  write_model_study("ok", "method: random, samples: 10", "");
  cr_assert_eq(brink("check study.yaml --try"), 0, "%s%s", read_file("out.txt"),
               read_file("err.txt"));
  char *out = read_file("out.txt");
  cr_assert(strstr(out, "/in.txt (from deck.txt)"), "%s", out);
  cr_assert(strstr(out, "exit status 0"), "%s", out);
  /* At the medians a = b = 0, so g = 1.5 and the sum is 0. */
  cr_assert(strstr(out, "g              = 1.5"), "%s", out);
  cr_assert(strstr(out, "total          = 0"), "%s", out);
  cr_assert(strstr(out, "safe at the medians"), "%s", out);
  /* Nothing written beside the study. */
  struct stat sb;
  char p[600];
  snprintf(p, sizeof p, "%s/out", dir);
  cr_assert_neq(stat(p, &sb), 0);
}

Test(commands, check_try_with_a_model_that_fails) {
  write_model_study("exit 7", "method: random, samples: 10", "");
  cr_assert_eq(brink("check study.yaml --try"), 1);
  char *out = read_file("out.txt");
  cr_assert(strstr(out, "exit status 7 (exit-code)"), "%s", out);
  cr_assert(strstr(out, "exiting with status 7"), "stderr shown: %s", out);
  cr_assert(strstr(out, "did not work"), "%s", out);
}

Test(commands, check_try_with_a_pattern_that_does_not_match) {
  write_model_study("ok", "method: random, samples: 10", "");
  char *s = read_file("study.yaml");
  char *at = strstr(s, "result: sum");
  cr_assert(at);
  memcpy(at, "result: SUM", 11);
  write_file("study.yaml", "%s", s);
  cr_assert_eq(brink("check study.yaml --try"), 1);
  char *out = read_file("out.txt");
  cr_assert(strstr(out, "total          NOT FOUND: no-match"), "%s", out);
  cr_assert(strstr(out, "stdout begins:"), "%s", out);
  /* The other output was still read. */
  cr_assert(strstr(out, "g              = 1.5"), "%s", out);
}

Test(commands, init_writes_starter_studies_that_check) {
  cr_assert_eq(brink("init a"), 0, "%s", read_file("err.txt"));
  cr_assert(strstr(read_file("out.txt"), "a/study.yaml"));
  cr_assert_eq(brink("check a/study.yaml"), 0, "%s", read_file("err.txt"));
  cr_assert(strstr(read_file("a/study.yaml"), "name: a\n"));
  /* Never overwrites. */
  cr_assert_eq(brink("init a --script"), 2);
  cr_assert(strstr(read_file("err.txt"), "never overwrites"));
  cr_assert_eq(brink("init s --script"), 0);
  cr_assert_eq(brink("check s/study.yaml --try"), 0, "%s",
               read_file("out.txt"));
  cr_assert_eq(brink("init f --fe"), 0);
  cr_assert_eq(brink("check f/study.yaml"), 0, "%s", read_file("err.txt"));
  /* The starter's comments name the run folder the study writes. */
  cr_assert(strstr(read_file("f/study.yaml"), "brink report runs/f --html"),
            "%s", read_file("f/study.yaml"));
  cr_assert(strstr(read_file("out.txt"), "runs/f"));
  if (access("/usr/bin/ccx", X_OK) == 0)
    cr_assert_eq(brink("check f/study.yaml --try"), 0, "%s",
                 read_file("out.txt"));
  cr_assert_eq(brink("init x --nonsense"), 2);
}

/* The manual page and the top-level help agree with each command's own
 * --help: every option a command's help names (each word starting with
 * '-') is in brink.1, and the top-level help shows each command with the
 * argument its usage line gives. */
Test(commands, manual_and_top_level_help_match_each_command) {
  const char *cmds[] = {"run",  "check", "report", "status", "export",
                        "init", "plan",  "submit", "merge"};
  char p[700];
  snprintf(p, sizeof p, "%s/brink.1", env("BRINK_SOURCE_ROOT"));
  FILE *f = fopen(p, "r");
  cr_assert(f, "%s", p);
  static char man[1 << 16];
  size_t n = fread(man, 1, sizeof man - 1, f);
  fclose(f);
  man[n] = '\0';
  /* roff writes '-' as "\-" */
  char *w = man;
  for (char *r = man; *r; r++)
    if (!(r[0] == '\\' && r[1] == '-'))
      *w++ = *r;
  *w = '\0';
  cr_assert_eq(brink("--help"), 0);
  char top[8192];
  snprintf(top, sizeof top, "%s", read_file("out.txt"));
  for (size_t i = 0; i < sizeof cmds / sizeof cmds[0]; i++) {
    char a[64];
    snprintf(a, sizeof a, "%s --help", cmds[i]);
    cr_assert_eq(brink(a), 0, "%s", cmds[i]);
    char *help = read_file("out.txt");
    /* "usage: brink CMD ARG ..." */
    char arg[64] = "";
    cr_assert_eq(sscanf(help, "usage: brink %*s %63s", arg), 1, "%s", help);
    arg[strcspn(arg, "|")] = '\0';
    char want[160];
    snprintf(want, sizeof want, "  %s %s", cmds[i], arg);
    cr_assert(strstr(top, want), "top-level help lacks '%s':\n%s", want, top);
    for (const char *q = help; (q = strstr(q, " -")) != NULL; q++) {
      char opt[64];
      if (sscanf(q + 1, "%63[-a-z]", opt) != 1 || strlen(opt) < 2 ||
          strcmp(opt, "--") == 0)
        continue;
      cr_assert(strstr(man, opt), "brink.1 lacks %s of `brink %s`", opt,
                cmds[i]);
    }
  }
}

Test(commands, every_command_has_help) {
  const char *cmds[] = {"run",  "check", "report", "status", "export",
                        "init", "plan",  "submit", "merge"};
  for (size_t i = 0; i < sizeof cmds / sizeof cmds[0]; i++) {
    char a[64];
    snprintf(a, sizeof a, "%s --help", cmds[i]);
    cr_assert_eq(brink(a), 0, "%s", cmds[i]);
    cr_assert(strstr(read_file("out.txt"), "usage: brink"), "%s", cmds[i]);
  }
  cr_assert_eq(brink("report"), 2);
  cr_assert(strstr(read_file("err.txt"), "e.g. brink report"));
  cr_assert_eq(brink("status nowhere"), 2);
  cr_assert(strstr(read_file("err.txt"), "not a run folder"));
  cr_assert_eq(brink("export nowhere --csv"), 2);
}

/* Several limit states over a model's output and a variable: report.json
 * has each mode, export one column per mode, and the HTML report the table
 * of the modes. An independent reader (Python's csv and json) recomputes
 * each mode from the exported inputs and outputs and counts its failures
 * and the system's, which must match the report. */
Test(commands, several_limit_states_in_report_export_and_html) {
  write_model_study("ok", "method: random, samples: 300",
                    "limit_states:\n"
                    "  bending: \"g\"\n"
                    "  sway: \"1.2 - a\"\n"
                    "system: series\n");
  /* write_model_study wrote limit_state too: take it out. */
  cr_assert_eq(sh("sed -i '/^limit_state: g$/d' study.yaml"), 0);
  cr_assert_eq(brink("run study.yaml -q"), 0, "%s", read_file("err.txt"));
  cr_assert_eq(brink("report out/linear"), 0);
  const char *text = read_file("out.txt");
  cr_expect(strstr(text, "limit states, system series"), "%s", text);
  cr_expect(strstr(text, "drives the system's failure"), "%s", text);
  cr_assert_eq(brink("export out/linear --csv -o e.csv"), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(brink("export study.yaml --json-lines -o e.jsonl"), 0);
  cr_assert_eq(brink("report out/linear --html r.html"), 0, "%s",
               read_file("err.txt"));
  char *csv = read_file("e.csv");
  cr_expect(
      strncmp(csv, "key,a,b,g,total,limit_state,bending,sway,failed", 47) == 0,
      "header: %.80s", csv);
  cr_expect(strstr(read_file("r.html"), "<h3>Limit states</h3>"));
  if (!have_python())
    cr_skip_test("no /usr/bin/python3 for the independent parsers");
  write_file("chk.py",
             "import csv, json, sys\n"
             "rep = json.load(open('out/linear/report.json'))\n"
             "rows = list(csv.DictReader(open('e.csv')))\n"
             "jl = [json.loads(x) for x in open('e.jsonl')]\n"
             "assert len(rows) == rep['evaluations'] == len(jl)\n"
             "kb = ks = ksys = 0\n"
             "for r, j in zip(rows, jl):\n"
             "    a, g = float(r['a']), float(r['g'])\n"
             "    assert float(r['bending']) == g == j['bending']\n"
             "    assert float(r['sway']) == 1.2 - a == j['sway']\n"
             "    assert float(r['limit_state']) == min(g, 1.2 - a)\n"
             "    kb += g <= 0; ks += 1.2 - a <= 0\n"
             "    ksys += min(g, 1.2 - a) <= 0\n"
             "c = rep['components']\n"
             "n = len(rows)\n"
             "assert c['bending']['failures'] == kb, (c, kb)\n"
             "assert c['sway']['failures'] == ks, (c, ks)\n"
             "assert rep['failures'] == ksys\n"
             "assert c['bending']['pf'] == kb / n and c['sway']['pf'] == ks / "
             "n\n"
             "assert rep['system'] == 'series'\n"
             "print('ok')\n");
  cr_assert_eq(sh("/usr/bin/python3 chk.py >chk.txt 2>&1"), 0, "%s",
               read_file("chk.txt"));
}

/* What if: `report --limit-state` on the records of an lhs run gives bit
 * for bit the numbers of a new run of the study with that limit state
 * (the model is deterministic), without running the model; it is marked
 * as a re-analysis and report.json stays as it was. */
Test(commands, reanalysis_equals_a_new_run_with_the_changed_limit_state) {
  write_model_study("ok", "method: lhs, samples: 120, replicates: 4",
                    "limit_states:\n"
                    "  bending: \"g\"\n"
                    "  sway: \"1.2 - a\"\n");
  cr_assert_eq(sh("sed -i '/^limit_state: g$/d' study.yaml"), 0);
  cr_assert_eq(brink("run study.yaml -q"), 0, "%s", read_file("err.txt"));
  char *before = strdup(read_file("out/linear/report.json"));
  cr_assert_eq(brink("report out/linear --json --limit-state "
                     "'sway=0.9 - a' --limit-state 'tip=g + 0.4'"),
               0, "%s", read_file("err.txt"));
  char *what = strdup(read_file("out.txt"));
  cr_expect(strstr(what, "\"reanalysis\": \"sway=0.9 - a; tip=g + 0.4\""), "%s",
            what);
  cr_expect_str_eq(read_file("out/linear/report.json"), before);
  /* The same study with sway changed and tip added, run anew. */
  cr_assert_eq(sh("sed -e 's/1.2 - a/0.9 - a/' -e 's#out/linear#out/new#' "
                  "-e 's/^  sway:/  tip: \"g + 0.4\"\\n  sway:/' study.yaml "
                  ">new.yaml"),
               0);
  cr_assert_eq(brink("run new.yaml -q"), 0, "%s", read_file("err.txt"));
  char *fresh = strdup(read_file("out/new/report.json"));
  /* System and modes: the same numbers, printed the same way. */
  const char *keys[] = {"\"pf\": ", "\"cov\": ", "\"ci\": "};
  for (int k = 0; k < 3; k++) {
    const char *a = strstr(what, keys[k]), *b = strstr(fresh, keys[k]);
    cr_assert(a && b);
    cr_expect(strncmp(a, b, strcspn(a, "\n")) == 0, "%.80s vs %.80s", a, b);
  }
  const char *modes[] = {"\"bending\": ", "\"sway\": ", "\"tip\": "};
  for (int k = 0; k < 3; k++) {
    const char *a = strstr(what, modes[k]), *b = strstr(fresh, modes[k]);
    cr_assert(a && b, "%s", modes[k]);
    a = strstr(a, "\"pf\": ");
    b = strstr(b, "\"pf\": ");
    cr_expect(strncmp(a, b, strcspn(a, ",")) == 0, "%s: %.40s vs %.40s",
              modes[k], a, b);
  }
  /* The text and the HTML say it is a re-analysis. */
  cr_assert_eq(brink("report out/linear --limit-state 'sway=0.9 - a'"), 0);
  cr_expect(strstr(read_file("out.txt"), "RE-ANALYSIS"));
  cr_assert_eq(brink("report out/linear --html w.html --limit-state "
                     "'sway=0.9 - a'"),
               0, "%s", read_file("err.txt"));
  cr_expect(strstr(read_file("w.html"), "<b>Re-analysis</b>"));
  free(before);
  free(what);
  free(fresh);
}

Test(commands, reanalysis_refusals_say_why) {
  write_model_study("ok", "method: random, samples: 40", "");
  cr_assert_eq(brink("run study.yaml -q"), 0, "%s", read_file("err.txt"));
  cr_assert_eq(brink("report out/linear --limit-state sway"), 2);
  cr_expect(strstr(read_file("err.txt"), "--limit-state takes NAME=EXPRESSION"),
            "%s", read_file("err.txt"));
  cr_assert_eq(brink("report out/linear --limit-state 'x=1 - nosuch'"), 2);
  cr_expect(strstr(read_file("err.txt"), "unknown name 'nosuch'"), "%s",
            read_file("err.txt"));
  cr_assert_eq(brink("report out/linear --limit-state 'a=1 - b'"), 2);
  cr_expect(strstr(read_file("err.txt"), "'a' is the name of a variable"), "%s",
            read_file("err.txt"));
  /* One limit state: limit_state names it. */
  cr_assert_eq(brink("report out/linear --json --limit-state "
                     "'limit_state=g - 5'"),
               0, "%s", read_file("err.txt"));
  cr_expect(strstr(read_file("out.txt"), "\"pf\": 1,"), "%s",
            read_file("out.txt"));
  /* Adaptive methods chose their points from g. */
  write_file("f.yaml", "variables: {x: {type: normal, mean: 3, sd: 1}}\n"
                       "limit_state: x\n"
                       "analysis: {method: form}\n"
                       "run: {folder: out/f}\n");
  cr_assert_eq(brink("report f.yaml --limit-state 'limit_state=x - 1'"), 2);
  cr_expect(strstr(read_file("err.txt"), "the form method chose where to "
                                         "evaluate from the values of g"),
            "%s", read_file("err.txt"));
  /* Records with a gap: the re-analysis needs every evaluation. */
  cr_assert_eq(sh("grep -v -P '^mc/7\\t' out/linear/records.log > r && "
                  "mv r out/linear/records.log"),
               0);
  int rc = brink("report out/linear --limit-state 'limit_state=g - 1'");
  cr_expect_eq(rc, 1, "%s", read_file("err.txt"));
  cr_expect(strstr(read_file("err.txt"), "not in"), "%s", read_file("err.txt"));
}

/* A run of several limit states made again from its records (every key
 * replayed, the modes computed again from the recorded inputs and
 * outputs) ends with the same report, bit for bit; check lists the modes. */
Test(commands, several_limit_states_replay_to_the_same_report) {
  write_model_study("ok", "method: sobol, samples: 64, replicates: 4",
                    "limit_states:\n"
                    "  bending: \"g\"\n"
                    "  sway: \"1.2 - a\"\n"
                    "system: parallel\n");
  cr_assert_eq(sh("sed -i '/^limit_state: g$/d' study.yaml"), 0);
  cr_assert_eq(brink("check study.yaml"), 0, "%s", read_file("err.txt"));
  cr_expect(strstr(read_file("out.txt"), "sway           g = 1.2 - a"), "%s",
            read_file("out.txt"));
  cr_expect(strstr(read_file("out.txt"), "system: parallel"));
  cr_assert_eq(brink("check study.yaml --try"), 0, "%s", read_file("err.txt"));
  cr_expect(strstr(read_file("out.txt"),
                   "limit state sway = 1.2 (safe at the medians)"),
            "%s", read_file("out.txt"));
  cr_expect(strstr(read_file("out.txt"), "system g = 1.5 (safe"), "%s",
            read_file("out.txt"));
  cr_assert_eq(brink("run study.yaml -q"), 0, "%s", read_file("err.txt"));
  char *first = strdup(read_file("out/linear/report.json"));
  cr_assert_eq(sh("rm out/linear/report.json out/linear/report.txt"), 0);
  cr_assert_eq(brink("run study.yaml -q"), 0, "%s", read_file("err.txt"));
  char *again = read_file("out/linear/report.json");
  const char *a = strstr(first, "\"components\""),
             *b = strstr(again, "\"components\"");
  cr_assert(a && b);
  cr_expect(strncmp(a, b, (size_t)(strstr(a, "\"warnings\"") - a)) == 0,
            "%.400s\nvs\n%.400s", a, b);
  cr_expect(strncmp(strstr(first, "\"pf\""), strstr(again, "\"pf\""), 40) == 0);
  free(first);
}
