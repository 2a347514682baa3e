/*
 * `brink init`: writes a commented starter study (and its deck and model
 * script) into a folder, from the templates shipped with brink, so that a
 * new user edits a study that runs rather than starts from a blank page.
 * The templates are looked up in $BRINK_TEMPLATES, beside the installed
 * executable (../share/brink/templates), in the data folder chosen at build
 * time, and in the source tree of an uninstalled build.
 *
 * SPDX-License-Identifier: MIT
 */
#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "cmd/cli.h"
#include "base/error.h"

#ifndef BK_DATADIR
#define BK_DATADIR ""
#endif
#ifndef BK_SOURCE_ROOT
#define BK_SOURCE_ROOT ""
#endif

static const char init_help[] =
    "usage: brink init FOLDER [--analytic | --script | --fe]\n"
    "\n"
    "Writes a commented starter study into FOLDER (made if absent) that\n"
    "runs as is; edit it rather than start from a blank page.\n"
    "\n"
    "  --analytic   a limit state on the variables alone, no program "
    "(default)\n"
    "  --script     an external program (a small shell script) run once per\n"
    "               sample, with an input deck rendered from a template\n"
    "  --fe         the finite-element solver CalculiX (ccx) on a beam deck\n"
    "\n"
    "Existing files are never overwritten. Then:\n"
    "  brink check FOLDER/study.yaml --try\n"
    "  brink run FOLDER/study.yaml\n";

static int is_dir(const char *p) {
  struct stat st;
  return stat(p, &st) == 0 && S_ISDIR(st.st_mode);
}

/* The templates folder for `kind`, or NULL (the places tried in *tried). */
static char *find_templates(const char *kind, bk_buf_t *tried) {
  const char *env = getenv("BRINK_TEMPLATES");
  bk_buf_t c;
  bk_buf_init(&c);
  char exe[4096];
  ssize_t n = readlink("/proc/self/exe", exe, sizeof exe - 1);
  if (n > 0) {
    exe[n] = '\0';
    char *slash = strrchr(exe, '/');
    if (slash)
      *slash = '\0';
  } else {
    exe[0] = '\0';
  }
  const char *bases[4] = {env && *env ? env : NULL, NULL, NULL, NULL};
  bk_buf_t b1, b2, b3;
  bk_buf_init(&b1);
  bk_buf_init(&b2);
  bk_buf_init(&b3);
  if (exe[0]) {
    bk_buf_printf(&b1, "%s/../share/brink/templates", exe);
    bases[1] = b1.data;
  }
  if (BK_DATADIR[0]) {
    bk_buf_printf(&b2, "%s/brink/templates", BK_DATADIR);
    bases[2] = b2.data;
  }
  if (BK_SOURCE_ROOT[0]) {
    bk_buf_printf(&b3, "%s/templates", BK_SOURCE_ROOT);
    bases[3] = b3.data;
  }
  char *found = NULL;
  for (int i = 0; i < 4 && !found; i++) {
    if (!bases[i])
      continue;
    bk_buf_reset(&c);
    bk_buf_printf(&c, "%s/%s", bases[i], kind);
    bk_buf_printf(tried, "  %s\n", c.data);
    if (is_dir(c.data))
      found = bk_strdup(c.data);
  }
  bk_buf_close(&c);
  bk_buf_close(&b1);
  bk_buf_close(&b2);
  bk_buf_close(&b3);
  return found;
}

/* Copies one file, keeping its permission bits; refuses to overwrite. */
static int copy_one(const char *from, const char *to, const char *name,
                    const char *study_name) {
  FILE *in = fopen(from, "r");
  if (!in)
    return -errno;
  struct stat st;
  if (fstat(fileno(in), &st) != 0) {
    int e = -errno;
    fclose(in);
    return e;
  }
  int fd = open(to, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, st.st_mode & 0777);
  if (fd < 0) {
    int e = -errno;
    fclose(in);
    return e;
  }
  FILE *out = fdopen(fd, "w");
  if (!out) {
    int e = -errno;
    close(fd);
    fclose(in);
    return e;
  }
  /* The study is named after its folder, and the template's own name in
   * its comments (the run folder runs/NAME they point to) follows. */
  int is_study = study_name && strcmp(name, "study.yaml") == 0;
  char line[4096], old[128] = "";
  while (is_study && !old[0] && fgets(line, sizeof line, in))
    if (strncmp(line, "name: ", 6) == 0)
      sscanf(line + 6, "%127s", old);
  rewind(in);
  int named = 0;
  while (fgets(line, sizeof line, in)) {
    if (is_study && !named && strncmp(line, "name: ", 6) == 0) {
      fprintf(out, "name: %s\n", study_name);
      named = 1;
      continue;
    }
    const char *p = line, *hit;
    size_t ol = strlen(old);
    while (is_study && ol && line[0] == '#' && (hit = strstr(p, old))) {
      fwrite(p, 1, (size_t)(hit - p), out);
      fputs(study_name, out);
      p = hit + ol;
    }
    fputs(p, out);
  }
  fclose(in);
  return fclose(out) == 0 ? 0 : -errno;
}

/* A folder's last component, when it is a usable study name. */
static char *name_of(const char *folder) {
  char *abs = realpath(folder, NULL);
  if (!abs)
    return NULL;
  const char *b = strrchr(abs, '/');
  b = b ? b + 1 : abs;
  char *name = NULL;
  if (*b && strlen(b) < 64 &&
      strspn(b, "abcdefghijklmnopqrstuvwxyz"
                "ABCDEFGHIJKLMNOPQRSTUVWXYZ"
                "0123456789-_.") == strlen(b))
    name = bk_strdup(b);
  free(abs);
  return name;
}

int bk__cmd_init(int argc, char **argv) {
  const char *folder = NULL, *kind = "analytic";
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(init_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "--analytic") == 0)
      kind = "analytic";
    else if (strcmp(argv[i], "--script") == 0)
      kind = "script";
    else if (strcmp(argv[i], "--fe") == 0)
      kind = "fe";
    else if (argv[i][0] == '-')
      return bk__cli_usage_error(
          "init: unknown option '%s' (choose --analytic, --script or --fe)",
          argv[i]);
    else if (folder)
      return bk__cli_usage_error("init: one folder at a time ('%s' is extra)",
                                 argv[i]);
    else
      folder = argv[i];
  }
  if (!folder)
    return bk__cli_usage_error("init: %s",
                               "give the folder to write the starter study "
                               "into, e.g. brink init my-study --script");
  bk_buf_t tried;
  bk_buf_init(&tried);
  char *src = find_templates(kind, &tried);
  if (!src) {
    fprintf(stderr,
            "brink: cannot find the starter studies ('%s'); looked in:\n%s"
            "Set BRINK_TEMPLATES to the templates folder of the brink "
            "sources.\n",
            kind, tried.data ? tried.data : "  (nowhere)\n");
    bk_buf_close(&tried);
    return BK_EXIT_RUNTIME;
  }
  bk_buf_close(&tried);
  int rc = bk__cli_make_dirs(folder);
  if (rc) {
    fprintf(stderr, "brink: cannot create %s: %s\n", folder, bk_strerror(rc));
    bk_free(src);
    return BK_EXIT_RUNTIME;
  }
  DIR *d = opendir(src);
  struct dirent *e;
  /* Refuse before writing anything when a file is in the way. */
  int clash = 0;
  while (d && (e = readdir(d)) != NULL) {
    if (e->d_name[0] == '.')
      continue;
    bk_buf_t to;
    bk_buf_init(&to);
    if (bk_buf_printf(&to, "%s/%s", folder, e->d_name)) {
      fprintf(stderr, "brink: out of memory\n");
      clash = 1;
    } else if (access(to.data, F_OK) == 0) {
      fprintf(stderr,
              "brink: %s exists; init never overwrites. Choose a "
              "new folder, or move the file away\n",
              to.data);
      clash = 1;
    }
    bk_buf_close(&to);
  }
  if (clash || !d) {
    if (d)
      closedir(d);
    bk_free(src);
    return BK_EXIT_USAGE;
  }
  rewinddir(d);
  char *name = name_of(folder);
  int exit_code = BK_EXIT_DONE;
  printf("Starter study (%s) written to %s:\n", kind, folder);
  while ((e = readdir(d)) != NULL) {
    if (e->d_name[0] == '.')
      continue;
    bk_buf_t from, to;
    bk_buf_init(&from);
    bk_buf_init(&to);
    if (bk_buf_printf(&from, "%s/%s", src, e->d_name) ||
        bk_buf_printf(&to, "%s/%s", folder, e->d_name))
      rc = BK_ENOMEM;
    else
      rc = copy_one(from.data, to.data, e->d_name, name);
    if (rc) {
      fprintf(stderr, "brink: cannot write %s/%s: %s\n", folder, e->d_name,
              bk_strerror(rc));
      exit_code = BK_EXIT_RUNTIME;
    } else {
      printf("  %s\n", to.data);
    }
    bk_buf_close(&from);
    bk_buf_close(&to);
  }
  closedir(d);
  if (exit_code == BK_EXIT_DONE) {
    printf("\nNext:\n");
    printf("  brink check %s/study.yaml%s\n", folder,
           strcmp(kind, "analytic") ? " --try   (runs the model once)" : "");
    printf("  brink run %s/study.yaml\n", folder);
    printf("  brink report %s/runs/%s --html report.html\n", folder,
           name ? name : "NAME");
    if (strcmp(kind, "fe") == 0 && access("/usr/bin/ccx", X_OK) != 0)
      printf("(--fe needs CalculiX's ccx on the PATH, e.g. the Debian "
             "package calculix-ccx)\n");
  }
  bk_free(name);
  bk_free(src);
  return exit_code;
}
