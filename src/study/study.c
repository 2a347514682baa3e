/*
 * Study files: YAML (libyaml's document loader) to a validated, immutable
 * bk_study_t. Every check that can be made before a run is made here, and
 * every error names file:line:col and what was expected, so that `brink run`
 * never starts a long study that would stop on a typo.
 *
 * Numbers are read as C floating-point literals (strtod, whole scalar), not
 * with YAML 1.1's own typing, so 7e10 and 7.0E+10 both work. Relative paths
 * are relative to the study file's folder.
 *
 * SPDX-License-Identifier: MIT
 */
#include "study/study.h"

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <sched.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include <yaml.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "numerics/sampler.h"

typedef struct {
  const char *path;
  const char *text;
  size_t len;
  yaml_document_t doc;
  bk_error_t *err;
  bk_study_t *s;
} loader_t;

static const char *const method_names[BK_METHOD__COUNT] = {
    "random",     "lhs",           "sobol",  "form",
    "importance", "cross-entropy", "subset", "surrogate",
};

const char *bk_study_method_name(bk_method_kind_t m) {
  return m < BK_METHOD__COUNT ? method_names[m] : "unknown";
}

const char *bk_study_launch_name(bk_launch_t l) {
  return l == BK_LAUNCH_SRUN ? "srun" : "direct";
}

int bk_study_machine_cores(void) {
#ifdef CPU_COUNT
  cpu_set_t set;
  if (sched_getaffinity(0, sizeof set, &set) == 0 && CPU_COUNT(&set) > 0)
    return CPU_COUNT(&set);
#endif
  long n = sysconf(_SC_NPROCESSORS_ONLN);
  return n > 0 ? (int)n : 1;
}

int bk_study_allocation_cores(void) {
  const char *v = getenv("SLURM_JOB_CPUS_PER_NODE");
  if (!v || !getenv("SLURM_JOB_ID"))
    return 0;
  long total = 0;
  while (*v) {
    char *end;
    long c = strtol(v, &end, 10);
    if (end == v || c < 0)
      return 0;
    long times = 1;
    if (strncmp(end, "(x", 2) == 0) {
      times = strtol(end + 2, &end, 10);
      if (*end != ')' || times < 1)
        return 0;
      end++;
    }
    total += c * times;
    if (total > 1L << 24)
      return 0;
    if (*end == ',')
      end++;
    else if (*end)
      return 0;
    v = end;
  }
  return (int)total;
}

int bk_study_hostfile_lines(const char *path) {
  FILE *f = path ? fopen(path, "r") : NULL;
  if (!f)
    return 0;
  int n = 0, c, blank = 1;
  while ((c = getc(f)) != EOF && n < 1 << 24) {
    if (c == '\n') {
      n += !blank;
      blank = 1;
    } else if (c != ' ' && c != '\t' && c != '\r') {
      blank = 0;
    }
  }
  n += !blank;
  fclose(f);
  return n;
}

int bk_study_available_cores(const bk_study_t *s) {
  int alloc = bk_study_allocation_cores();
  if (s->run.launch == BK_LAUNCH_SRUN && alloc > 0)
    return alloc;
  if (s->run.launch == BK_LAUNCH_DIRECT) {
    int lines = bk_study_hostfile_lines(getenv("PBS_NODEFILE"));
    if (lines > 0)
      return lines * (s->run.threads > 0 ? s->run.threads : 1);
  }
  return bk_study_machine_cores();
}

void bk_study_default_slots(bk_study_t *s, int cores) {
  if (s->run.slots_given)
    return;
  int per = s->run.cores > 0 ? s->run.cores : 1;
  int n = cores / per;
  s->run.slots = n < 1 ? 1 : n > 4096 ? 4096 : n;
}

/* ---- the keys a study file may hold --------------------------------- */

/* One list per mapping, NULL-terminated; check_keys refuses any other key,
 * and bk_study_keys hands the same lists to the test that every key is
 * documented in docs/study-file.md. */
static const char *const keys_root[] = {"name",         "seed",   "variables",
                                        "correlations", "model",  "limit_state",
                                        "limit_states", "system", "analysis",
                                        "run",          NULL};
static const char *const keys_model[] = {
    "files",   "copy",    "command",  "env",
    "timeout", "retries", "on_error", "max_error_fraction",
    "outputs", "keep",    "watch",    "version_command",
    "inherit", NULL};
static const char *const keys_deck[] = {"template", "to", NULL};
static const char *const keys_output[] = {"file", "stdout", "pattern", "match",
                                          NULL};
static const char *const keys_analysis[] = {
    "method",      "samples",   "replicates", "target_cov", "max_evaluations",
    "target_beta", "ci_level",  "form",       "importance", "cross_entropy",
    "subset",      "surrogate", NULL};
static const char *const keys_form[] = {
    "step",    "differences", "max_iterations", "tolerance", "sorm",
    "explore", "searches",    "probe",          NULL};
static const char *const keys_importance[] = {"center", "defensive", NULL};
static const char *const keys_ce[] = {"components", "rho", "max_steps", NULL};
static const char *const keys_subset[] = {"p0", "max_levels", NULL};
static const char *const keys_surrogate[] = {
    "batch",   "start_points", "trend",          "noisy",
    "pick_by", "spread",       "training_share", NULL};
static const char *const keys_run[] = {"folder", "slots",  "scratch", "threads",
                                       "ranks",  "launch", NULL};

static const struct {
  const char *prefix; /* the mapping's path; NAME stands for any name */
  const char *const *keys;
} key_lists[] = {
    {"", keys_root},
    {"model.", keys_model},
    {"model.files[].", keys_deck},
    {"model.outputs.NAME.", keys_output},
    {"analysis.", keys_analysis},
    {"analysis.form.", keys_form},
    {"analysis.importance.", keys_importance},
    {"analysis.cross_entropy.", keys_ce},
    {"analysis.subset.", keys_subset},
    {"analysis.surrogate.", keys_surrogate},
    {"run.", keys_run},
};

void bk_study_keys(bk_study_key_cb cb, void *data) {
  char key[128];
  for (size_t i = 0; i < sizeof key_lists / sizeof key_lists[0]; i++)
    for (const char *const *k = key_lists[i].keys; *k; k++) {
      snprintf(key, sizeof key, "%s%s", key_lists[i].prefix, *k);
      cb(key, data);
    }
  cb("variables.NAME.type", data);
  for (int p = 0; p < BK_PARAM__COUNT; p++) {
    snprintf(key, sizeof key, "variables.NAME.%s",
             bk_dist_param_name((bk_param_t)p));
    cb(key, data);
  }
}

/* ---- digest --------------------------------------------------------- */

static uint64_t mix64(uint64_t z) {
  z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
  z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
  return z ^ (z >> 31);
}

/* Two independent FNV-1a style lanes with a final avalanche; a change
 * detector for fingerprints, not a cryptographic hash. */
void bk_study_digest_hex(const void *data, size_t len, char hex[33]) {
  const unsigned char *p = data;
  uint64_t a = 0xcbf29ce484222325ULL, b = 0x84222325cbf29ce4ULL ^ len;
  for (size_t i = 0; i < len; i++) {
    a = (a ^ p[i]) * 0x100000001b3ULL;
    b = (b ^ p[i]) * 0x00000100000001b3ULL + 0x9e3779b97f4a7c15ULL;
    b ^= b >> 29;
  }
  a = mix64(a ^ len);
  b = mix64(b ^ a);
  snprintf(hex, 33, "%016llx%016llx", (unsigned long long)a,
           (unsigned long long)b);
}

/* ---- errors at nodes ------------------------------------------------ */

static int fail_at(loader_t *L, const yaml_mark_t *m, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));
static int fail_at(loader_t *L, const yaml_mark_t *m, const char *fmt, ...) {
  va_list ap;
  va_start(ap, fmt);
  bk_error_vset(L->err, BK_ESTUDY, L->path, m ? (int)m->line + 1 : 0,
                m ? (int)m->column + 1 : 0, fmt, ap);
  va_end(ap);
  return BK_ESTUDY;
}

#define FAIL(L, node, ...) fail_at((L), &(node)->start_mark, __VA_ARGS__)

static int nomem(loader_t *L) {
  return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
}

static yaml_node_t *node_at(loader_t *L, int id) {
  return yaml_document_get_node(&L->doc, id);
}

static const char *kind_word(const yaml_node_t *n) {
  switch (n->type) {
  case YAML_SCALAR_NODE:
    return "a single value";
  case YAML_SEQUENCE_NODE:
    return "a list";
  case YAML_MAPPING_NODE:
    return "a mapping";
  default:
    return "nothing";
  }
}

static const char *scalar(const yaml_node_t *n) {
  return (const char *)n->data.scalar.value;
}

static int is_null_scalar(const yaml_node_t *n) {
  if (n->type != YAML_SCALAR_NODE ||
      n->data.scalar.style != YAML_PLAIN_SCALAR_STYLE)
    return 0;
  const char *v = scalar(n);
  return v[0] == '\0' || strcmp(v, "~") == 0 || strcmp(v, "null") == 0;
}

static int want_text(loader_t *L, yaml_node_t *n, const char *what,
                     const char **out) {
  if (n->type != YAML_SCALAR_NODE || is_null_scalar(n))
    return FAIL(L, n, "%s must be a text, got %s", what,
                is_null_scalar(n) ? "nothing" : kind_word(n));
  *out = scalar(n);
  return 0;
}

static int want_number(loader_t *L, yaml_node_t *n, const char *what,
                       double *out) {
  if (n->type != YAML_SCALAR_NODE || is_null_scalar(n))
    return FAIL(L, n, "%s must be a number, got %s", what,
                is_null_scalar(n) ? "nothing" : kind_word(n));
  const char *v = scalar(n);
  char *end;
  errno = 0;
  double d = strtod(v, &end);
  while (*end == ' ')
    end++;
  if (end == v || *end != '\0' || !isfinite(d) ||
      (v[0] && (v[1] == 'x' || v[1] == 'X' ||
                (v[0] != '-' && v[0] != '+' && v[0] != '.' &&
                 !isdigit((unsigned char)v[0])))))
    return FAIL(L, n, "%s must be a number, got '%s'", what, v);
  *out = d;
  return 0;
}

static int want_count(loader_t *L, yaml_node_t *n, const char *what,
                      uint64_t min, uint64_t *out) {
  double d;
  int rc = want_number(L, n, what, &d);
  if (rc)
    return rc;
  if (d != floor(d) || d < (double)min || d > 9.007199254740992e15)
    return FAIL(L, n, "%s must be a whole number >= %llu, got '%s'", what,
                (unsigned long long)min, scalar(n));
  *out = (uint64_t)d;
  return 0;
}

static int is_identifier(const char *s) {
  if (!(isalpha((unsigned char)s[0]) || s[0] == '_'))
    return 0;
  for (const char *p = s + 1; *p; p++)
    if (!(isalnum((unsigned char)*p) || *p == '_'))
      return 0;
  return 1;
}

/* Checks that every key of mapping `m` is a text, unique and in `allowed`
 * (NULL-terminated). */
static int check_keys(loader_t *L, yaml_node_t *m, const char *where,
                      const char *const *allowed) {
  for (yaml_node_pair_t *p = m->data.mapping.pairs.start;
       p < m->data.mapping.pairs.top; p++) {
    yaml_node_t *k = node_at(L, p->key);
    if (k->type != YAML_SCALAR_NODE)
      return FAIL(L, k, "keys in %s must be names, got %s", where,
                  kind_word(k));
    for (yaml_node_pair_t *q = m->data.mapping.pairs.start; q < p; q++) {
      yaml_node_t *k0 = node_at(L, q->key);
      if (k0->type == YAML_SCALAR_NODE && strcmp(scalar(k0), scalar(k)) == 0)
        return FAIL(L, k, "duplicate key '%s' in %s (first given on line %d)",
                    scalar(k), where, (int)k0->start_mark.line + 1);
    }
    if (!allowed)
      continue;
    int ok = 0;
    for (const char *const *a = allowed; *a; a++)
      if (strcmp(*a, scalar(k)) == 0)
        ok = 1;
    if (!ok) {
      char list[512] = "";
      for (const char *const *a = allowed; *a; a++) {
        strncat(list, *a, sizeof list - strlen(list) - 1);
        if (a[1])
          strncat(list, ", ", sizeof list - strlen(list) - 1);
      }
      return FAIL(L, k, "unknown key '%s' in %s; expected one of: %s",
                  scalar(k), where, list);
    }
  }
  return 0;
}

static yaml_node_t *lookup(loader_t *L, yaml_node_t *m, const char *key) {
  for (yaml_node_pair_t *p = m->data.mapping.pairs.start;
       p < m->data.mapping.pairs.top; p++) {
    yaml_node_t *k = node_at(L, p->key);
    if (k->type == YAML_SCALAR_NODE && strcmp(scalar(k), key) == 0)
      return node_at(L, p->value);
  }
  return NULL;
}

static int want_mapping(loader_t *L, yaml_node_t *n, const char *what) {
  if (n->type != YAML_MAPPING_NODE)
    return FAIL(L, n, "%s must be a mapping (name: value lines), got %s", what,
                is_null_scalar(n) ? "nothing" : kind_word(n));
  return 0;
}

static int want_sequence(loader_t *L, yaml_node_t *n, const char *what) {
  if (n->type != YAML_SEQUENCE_NODE)
    return FAIL(L, n, "%s must be a list, got %s", what,
                is_null_scalar(n) ? "nothing" : kind_word(n));
  return 0;
}

/* Location of byte `off` inside scalar `n`'s value, when the value appears
 * verbatim in the file (plain or quoted without escapes on one line);
 * otherwise the scalar's start. */
static void scalar_offset_mark(loader_t *L, yaml_node_t *n, size_t off,
                               yaml_mark_t *out) {
  *out = n->start_mark;
  size_t start = n->start_mark.index;
  yaml_scalar_style_t st = n->data.scalar.style;
  if (st == YAML_SINGLE_QUOTED_SCALAR_STYLE ||
      st == YAML_DOUBLE_QUOTED_SCALAR_STYLE)
    start++;
  else if (st != YAML_PLAIN_SCALAR_STYLE)
    return;
  size_t vlen = n->data.scalar.length;
  if (off > vlen || start + off > L->len ||
      memcmp(L->text + start, n->data.scalar.value, off) != 0)
    return;
  size_t line = n->start_mark.line, col = n->start_mark.column;
  for (size_t i = n->start_mark.index; i < start + off; i++) {
    if (L->text[i] == '\n') {
      line++;
      col = 0;
    } else {
      col++;
    }
  }
  out->line = line;
  out->column = col;
}

/* Removes "." components and "name/.." pairs, lexically (as a user reads
 * the path; symbolic links are not consulted). Works in place: the output
 * never runs ahead of the input, because each component is written with
 * the separator before it. */
static void normalize_path(char *path) {
  int absolute = path[0] == '/';
  char *start = path + absolute;
  char *out = start;
  const char *in = start;
  while (*in) {
    const char *end = strchr(in, '/');
    size_t len = end ? (size_t)(end - in) : strlen(in);
    int dot = len == 1 && in[0] == '.';
    int dotdot = len == 2 && in[0] == '.' && in[1] == '.';
    if (len == 0 || dot) {
      /* nothing to write */
    } else if (dotdot && out > start) {
      char *last = out;
      while (last > start && last[-1] != '/')
        last--;
      if (strncmp(last, "..", 2) == 0 && out - last == 2) {
        *out++ = '/';
        memmove(out, "..", 2);
        out += 2;
      } else {
        out = last > start ? last - 1 : start;
      }
    } else if (dotdot && absolute) {
      /* "/.." is "/" */
    } else {
      if (out > start)
        *out++ = '/';
      memmove(out, in, len);
      out += len;
    }
    in += len;
    if (*in == '/')
      in++;
  }
  *out = '\0';
  if (path[0] == '\0')
    strcpy(path, ".");
}

static char *resolve_path(const char *dir, const char *p) {
  bk_buf_t b;
  bk_buf_init(&b);
  if (p[0] == '/' || strcmp(dir, ".") == 0)
    bk_buf_puts(&b, p);
  else
    bk_buf_printf(&b, "%s/%s", dir, p);
  if (b.data)
    normalize_path(b.data);
  return b.data;
}

static int read_file(const char *path, char **text, size_t *len) {
  FILE *f = fopen(path, "rb");
  if (!f)
    return -errno;
  bk_buf_t b;
  bk_buf_init(&b);
  char chunk[65536];
  size_t n;
  int rc = 0;
  while ((n = fread(chunk, 1, sizeof chunk, f)) > 0)
    if (bk_buf_append(&b, chunk, n)) {
      rc = BK_ENOMEM;
      break;
    }
  if (ferror(f))
    rc = BK_EIO;
  fclose(f);
  if (rc == 0 && !b.data)
    rc = bk_buf_reserve(&b, 0);
  if (rc) {
    bk_buf_close(&b);
    return rc;
  }
  *text = b.data;
  *len = b.len;
  return 0;
}

/* ---- variables ------------------------------------------------------ */

static int load_variable(loader_t *L, yaml_node_t *k, yaml_node_t *v,
                         bk_var_t *var) {
  const char *name = scalar(k);
  if (!is_identifier(name) || name[0] == '_')
    return FAIL(L, k,
                "variable name '%s' must start with a letter and contain "
                "only letters, digits and '_'",
                name);
  var->name = bk_strdup(name);
  if (!var->name)
    return nomem(L);
  var->line = (int)k->start_mark.line + 1;
  bk_dist_spec_t spec;
  memset(&spec, 0, sizeof spec);
  if (v->type == YAML_SCALAR_NODE && !is_null_scalar(v)) {
    /* Shorthand: a plain number is a constant. */
    double d;
    int rc = want_number(L, v, "a variable given as a single value", &d);
    if (rc)
      return rc;
    spec.has = 1u << BK_PARAM_VALUE;
    spec.v[BK_PARAM_VALUE] = d;
    char why[256];
    int bad;
    if (bk_dist_init(&var->dist, BK_DIST_CONSTANT, &spec, why, sizeof why,
                     &bad))
      return FAIL(L, v, "variable '%s': %s", name, why);
    return 0;
  }
  char where[160];
  snprintf(where, sizeof where, "variable '%s'", name);
  int rc = want_mapping(L, v, where);
  if (rc)
    return rc;
  rc = check_keys(L, v, where, NULL);
  if (rc)
    return rc;
  yaml_node_t *tn = lookup(L, v, "type");
  char types[400] = "";
  for (int i = 0; i < BK_DIST__COUNT; i++) {
    strncat(types, bk_dist_name((bk_dist_kind_t)i),
            sizeof types - strlen(types) - 1);
    if (i + 1 < BK_DIST__COUNT)
      strncat(types, ", ", sizeof types - strlen(types) - 1);
  }
  if (!tn)
    return FAIL(L, v, "variable '%s' needs a type: one of %s", name, types);
  const char *tname;
  if ((rc = want_text(L, tn, "type", &tname)))
    return rc;
  int kind = bk_dist_kind_from_name(tname);
  if (kind < 0)
    return FAIL(L, tn, "unknown distribution type '%s'; expected one of %s",
                tname, types);
  yaml_node_t *pnode[BK_PARAM__COUNT] = {0};
  for (yaml_node_pair_t *p = v->data.mapping.pairs.start;
       p < v->data.mapping.pairs.top; p++) {
    yaml_node_t *pk = node_at(L, p->key), *pv = node_at(L, p->value);
    if (strcmp(scalar(pk), "type") == 0)
      continue;
    int param = bk_dist_param_from_name(scalar(pk));
    if (param < 0) {
      char list[400] = "type";
      for (int i = 0; i < BK_PARAM__COUNT; i++) {
        strncat(list, ", ", sizeof list - strlen(list) - 1);
        strncat(list, bk_dist_param_name((bk_param_t)i),
                sizeof list - strlen(list) - 1);
      }
      return FAIL(L, pk,
                  "unknown key '%s' in variable '%s'; expected one of: %s",
                  scalar(pk), name, list);
    }
    char what[160];
    snprintf(what, sizeof what, "%s of variable '%s'", scalar(pk), name);
    if ((rc = want_number(L, pv, what, &spec.v[param])))
      return rc;
    spec.has |= 1u << param;
    pnode[param] = pv;
  }
  char why[256] = "";
  int bad = -1;
  if (bk_dist_init(&var->dist, (bk_dist_kind_t)kind, &spec, why, sizeof why,
                   &bad)) {
    yaml_node_t *at =
        (bad >= 0 && bad < BK_PARAM__COUNT && pnode[bad]) ? pnode[bad] : v;
    if (bad >= 0 && bad < BK_PARAM__COUNT && pnode[bad]) {
      /* Point at the key, which reads better than the value. */
      for (yaml_node_pair_t *p = v->data.mapping.pairs.start;
           p < v->data.mapping.pairs.top; p++)
        if (node_at(L, p->value) == pnode[bad])
          at = node_at(L, p->key);
    }
    return FAIL(L, at, "variable '%s' (%s): %s", name, tname, why);
  }
  return 0;
}

static int load_variables(loader_t *L, yaml_node_t *vn) {
  bk_study_t *s = L->s;
  int rc = want_mapping(L, vn, "variables");
  if (rc)
    return rc;
  if ((rc = check_keys(L, vn, "variables", NULL)))
    return rc;
  size_t n =
      (size_t)(vn->data.mapping.pairs.top - vn->data.mapping.pairs.start);
  if (n == 0)
    return FAIL(L, vn, "variables must name at least one variable");
  s->vars = bk_calloc(n, sizeof *s->vars);
  s->var_names = bk_calloc(n, sizeof *s->var_names);
  if (!s->vars || !s->var_names)
    return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
  for (yaml_node_pair_t *p = vn->data.mapping.pairs.start;
       p < vn->data.mapping.pairs.top; p++) {
    rc = load_variable(L, node_at(L, p->key), node_at(L, p->value),
                       &s->vars[s->nvars]);
    if (s->vars[s->nvars].name)
      s->var_names[s->nvars] = s->vars[s->nvars].name;
    s->nvars++;
    if (rc)
      return rc;
  }
  return 0;
}

static int var_index(const bk_study_t *s, const char *name) {
  for (size_t i = 0; i < s->nvars; i++)
    if (strcmp(s->vars[i].name, name) == 0)
      return (int)i;
  return -1;
}

static int load_correlations(loader_t *L, yaml_node_t *cn) {
  bk_study_t *s = L->s;
  int rc = want_sequence(L, cn, "correlations");
  if (rc)
    return rc;
  size_t n =
      (size_t)(cn->data.sequence.items.top - cn->data.sequence.items.start);
  yaml_node_t **items = bk_calloc(n, sizeof *items);
  s->corr = bk_calloc(n, sizeof *s->corr);
  if (!s->corr || !items) {
    bk_free(items);
    return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
  }
  for (size_t i = 0; i < n; i++) {
    yaml_node_t *it = node_at(L, cn->data.sequence.items.start[i]);
    items[i] = it;
    if (it->type != YAML_SEQUENCE_NODE ||
        it->data.sequence.items.top - it->data.sequence.items.start != 3) {
      rc = FAIL(L, it,
                "each correlation is a list [variable, variable, rho], "
                "e.g. [fy, t, 0.3]");
      goto done;
    }
    yaml_node_t *na = node_at(L, it->data.sequence.items.start[0]);
    yaml_node_t *nb = node_at(L, it->data.sequence.items.start[1]);
    yaml_node_t *nr = node_at(L, it->data.sequence.items.start[2]);
    const char *a, *b;
    if ((rc = want_text(L, na, "a correlated variable", &a)) ||
        (rc = want_text(L, nb, "a correlated variable", &b)))
      goto done;
    int ia = var_index(s, a), ib = var_index(s, b);
    if (ia < 0 || ib < 0) {
      yaml_node_t *bad = ia < 0 ? na : nb;
      rc = FAIL(L, bad, "unknown variable '%s' in a correlation", scalar(bad));
      goto done;
    }
    if (ia == ib) {
      rc = FAIL(L, nb, "a variable cannot be correlated with itself ('%s')", a);
      goto done;
    }
    double rho;
    if ((rc = want_number(L, nr, "a correlation coefficient", &rho)))
      goto done;
    if (!(rho > -1 && rho < 1)) {
      rc = FAIL(L, nr,
                "correlation of %s and %s must lie strictly between "
                "-1 and 1 (got %g)",
                a, b, rho);
      goto done;
    }
    s->corr[i].a = (size_t)ia;
    s->corr[i].b = (size_t)ib;
    s->corr[i].rho = rho;
    s->ncorr++;
  }
  rc = 0;
done:
  bk_free(items);
  return rc;
}

/* Builds the Nataf transformation, locating its errors at the offending
 * correlation (or the correlations list). */
static int build_transform(loader_t *L, yaml_node_t *cn) {
  bk_study_t *s = L->s;
  bk_dist_t *d = bk_calloc(s->nvars, sizeof *d);
  if (!d)
    return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
  for (size_t i = 0; i < s->nvars; i++)
    d[i] = s->vars[i].dist;
  char why[300] = "";
  int bad = -1;
  int rc = bk_transform_new(&s->transform, s->nvars, d, s->ncorr, s->corr, why,
                            sizeof why, &bad);
  bk_free(d);
  if (rc == 0)
    return 0;
  if (rc == BK_ENOMEM)
    return nomem(L);
  if (cn && bad >= 0 && (size_t)bad < s->ncorr) {
    yaml_node_t *it = node_at(L, cn->data.sequence.items.start[bad]);
    return FAIL(L, it, "correlation of %s and %s: %s",
                s->vars[s->corr[bad].a].name, s->vars[s->corr[bad].b].name,
                why);
  }
  if (cn)
    return FAIL(L, cn, "correlations: %s", why);
  return bk_error_set(L->err, BK_ESTUDY, L->path, 0, 0, "%s", why);
}

/* ---- model ---------------------------------------------------------- */

static int load_string_list(loader_t *L, yaml_node_t *n, const char *what,
                            char ***out, size_t *count) {
  int rc = want_sequence(L, n, what);
  if (rc)
    return rc;
  size_t cnt =
      (size_t)(n->data.sequence.items.top - n->data.sequence.items.start);
  char **v = bk_calloc(cnt + 1, sizeof *v);
  if (!v)
    return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
  *out = v;
  for (size_t i = 0; i < cnt; i++) {
    yaml_node_t *it = node_at(L, n->data.sequence.items.start[i]);
    const char *t;
    if ((rc = want_text(L, it, what, &t)))
      return rc;
    v[i] = bk_strdup(t);
    if (!v[i])
      return nomem(L);
    *count = i + 1;
  }
  return 0;
}

static int load_outputs(loader_t *L, yaml_node_t *on) {
  bk_model_t *m = &L->s->model;
  int rc = want_mapping(L, on, "model.outputs");
  if (rc)
    return rc;
  if ((rc = check_keys(L, on, "model.outputs", NULL)))
    return rc;
  size_t n =
      (size_t)(on->data.mapping.pairs.top - on->data.mapping.pairs.start);
  m->outputs = bk_calloc(n ? n : 1, sizeof *m->outputs);
  if (!m->outputs)
    return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
  for (yaml_node_pair_t *p = on->data.mapping.pairs.start;
       p < on->data.mapping.pairs.top; p++) {
    yaml_node_t *k = node_at(L, p->key), *v = node_at(L, p->value);
    bk_output_t *o = &m->outputs[m->noutputs++];
    const char *name = scalar(k);
    if (!is_identifier(name) || name[0] == '_')
      return FAIL(L, k,
                  "output name '%s' must start with a letter and "
                  "contain only letters, digits and '_'",
                  name);
    if (var_index(L->s, name) >= 0)
      return FAIL(L, k,
                  "output '%s' has the name of a variable; choose "
                  "another name",
                  name);
    o->name = bk_strdup(name);
    if (!o->name)
      return nomem(L);
    char where[160];
    snprintf(where, sizeof where, "output '%s'", name);
    if ((rc = want_mapping(L, v, where)) ||
        (rc = check_keys(L, v, where, keys_output)))
      return rc;
    yaml_node_t *fn = lookup(L, v, "file"), *sn = lookup(L, v, "stdout");
    yaml_node_t *pn = lookup(L, v, "pattern"), *mn = lookup(L, v, "match");
    if (sn) {
      const char *t;
      if ((rc = want_text(L, sn, "stdout", &t)))
        return rc;
      if (strcmp(t, "true") == 0)
        o->from_stdout = 1;
      else if (strcmp(t, "false") != 0)
        return FAIL(L, sn, "stdout must be true or false, got '%s'", t);
    }
    if (fn && o->from_stdout)
      return FAIL(L, fn,
                  "output '%s': give either file or stdout: true, "
                  "not both",
                  name);
    if (!fn && !o->from_stdout)
      return FAIL(L, v,
                  "output '%s' needs a file to read (file: NAME) or "
                  "stdout: true",
                  name);
    if (fn) {
      const char *t;
      if ((rc = want_text(L, fn, "file", &t)))
        return rc;
      if (t[0] == '/' || strstr(t, ".."))
        return FAIL(L, fn,
                    "output file '%s' must be a path inside the run "
                    "folder (no leading '/' and no '..')",
                    t);
      o->file = bk_strdup(t);
      if (!o->file)
        return nomem(L);
    }
    if (!pn)
      return FAIL(L, v,
                  "output '%s' needs a pattern (a regular expression "
                  "whose first group is the number)",
                  name);
    const char *pat;
    if ((rc = want_text(L, pn, "pattern", &pat)))
      return rc;
    o->pattern = bk_strdup(pat);
    if (!o->pattern)
      return nomem(L);
    char msg[256] = "";
    size_t off = 0;
    int prc = bk_extract_pattern_compile(pat, &o->re, msg, sizeof msg, &off);
    if (prc == BK_ENOMEM)
      return nomem(L);
    if (prc) {
      yaml_mark_t mk;
      scalar_offset_mark(L, pn, off, &mk);
      return fail_at(L, &mk, "invalid pattern for output '%s': %s", name, msg);
    }
    o->match = BK_MATCH_FIRST;
    if (mn) {
      const char *t;
      if ((rc = want_text(L, mn, "match", &t)))
        return rc;
      static const char *const mnames[] = {"first", "last", "max", "min"};
      int found = -1;
      for (int i = 0; i < 4; i++)
        if (strcmp(t, mnames[i]) == 0)
          found = i;
      if (found < 0)
        return FAIL(L, mn,
                    "match must be one of first, last, max, min; got "
                    "'%s'",
                    t);
      o->match = (bk_match_t)found;
    }
  }
  return 0;
}

/* The file `name`, which brink writes into each run folder (a deck, or a
 * copied file; the first `ndecks` decks are loaded), must not be one that
 * brink writes already: each is made afresh with O_EXCL, so a second file of
 * the same name would stop the run at its first evaluation. */
static int check_run_file_name(loader_t *L, yaml_node_t *at, const char *name,
                               size_t ndecks) {
  const bk_model_t *m = &L->s->model;
  if (strcmp(name, "stdout") == 0 || strcmp(name, "stderr") == 0)
    return FAIL(L, at,
                "'%s' is the file brink captures the model's standard %s "
                "into; choose another name",
                name, name[3] == 'o' ? "output" : "error");
  for (size_t i = 0; i < ndecks && i < m->ndecks; i++)
    if (m->decks[i].to && strcmp(m->decks[i].to, name) == 0)
      return FAIL(L, at,
                  "two files named '%s' go into each run folder (the deck "
                  "from '%s' is one); give each its own name",
                  name, m->decks[i].template_name);
  return 0;
}

static const char *base_name(const char *p) {
  const char *slash = strrchr(p, '/');
  return slash ? slash + 1 : p;
}

static int load_decks(loader_t *L, yaml_node_t *fn) {
  bk_model_t *m = &L->s->model;
  int rc = want_sequence(L, fn, "model.files");
  if (rc)
    return rc;
  size_t n =
      (size_t)(fn->data.sequence.items.top - fn->data.sequence.items.start);
  m->decks = bk_calloc(n ? n : 1, sizeof *m->decks);
  if (!m->decks)
    return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
  bk_names_t names = {(const char *const *)L->s->var_names, L->s->nvars};
  for (size_t i = 0; i < n; i++) {
    yaml_node_t *it = node_at(L, fn->data.sequence.items.start[i]);
    if ((rc = want_mapping(L, it, "each entry of model.files")) ||
        (rc = check_keys(L, it, "an entry of model.files", keys_deck)))
      return rc;
    yaml_node_t *tn = lookup(L, it, "template"), *to = lookup(L, it, "to");
    if (!tn)
      return FAIL(L, it, "each entry of model.files needs template: PATH");
    bk_deck_t *d = &m->decks[m->ndecks++];
    const char *t;
    if ((rc = want_text(L, tn, "template", &t)))
      return rc;
    d->template_name = bk_strdup(t);
    d->template_path = resolve_path(L->s->dir, t);
    if (!d->template_name || !d->template_path)
      return nomem(L);
    const char *dest = NULL;
    if (to && (rc = want_text(L, to, "to", &dest)))
      return rc;
    if (!dest) {
      dest = strrchr(t, '/') ? strrchr(t, '/') + 1 : t;
    }
    if (dest[0] == '/' || strstr(dest, "..") || !dest[0])
      return FAIL(L, to ? to : tn,
                  "'%s' must be a file name inside the run folder (no "
                  "leading '/' and no '..')",
                  dest);
    if (strchr(dest, '/'))
      return FAIL(L, to,
                  "'%s' must be a plain file name: decks are written at the "
                  "top of each run folder, which has no subfolders",
                  dest);
    if ((rc = check_run_file_name(L, to ? to : tn, dest, i)))
      return rc;
    d->to = bk_strdup(dest);
    if (!d->to)
      return nomem(L);
    char *text = NULL;
    size_t len = 0;
    int frc = read_file(d->template_path, &text, &len);
    if (frc == BK_ENOMEM)
      return nomem(L);
    if (frc)
      return FAIL(L, tn, "cannot read template '%s': %s", t, bk_strerror(frc));
    char hex[33];
    bk_study_digest_hex(text, len, hex);
    d->digest = bk_strdup(hex);
    if (!d->digest) {
      bk_free(text);
      return nomem(L);
    }
    bk_error_t terr;
    bk_error_clear(&terr);
    int prc =
        bk_template_parse(d->template_path, text, len, &names, &d->tpl, &terr);
    bk_free(text);
    if (prc == BK_ENOMEM)
      return nomem(L);
    if (prc) {
      /* The template's own location is the useful one. */
      *L->err = terr;
      L->err->code = BK_ESTUDY;
      return BK_ESTUDY;
    }
  }
  return 0;
}

/* A relative program path with a '/' is resolved in each run folder, which
 * holds only the decks and the copied files, without subfolders: unless it
 * climbs out with "..", it must name a copied file ("./run.sh"). A deck
 * cannot be run, as it is written without execute permission. */
static int check_run_folder_program(loader_t *L, yaml_node_t *n,
                                    const char *prog) {
  const bk_model_t *m = &L->s->model;
  const char *name = prog;
  while (strncmp(name, "./", 2) == 0)
    name += 2;
  if (strncmp(name, "../", 3) == 0)
    return 0;
  if (strchr(name, '/'))
    return FAIL(L, n,
                "program '%s' would be looked for in a subfolder of each run "
                "folder, and run folders have none; give its full path",
                prog);
  for (size_t i = 0; i < m->ndecks; i++)
    if (strcmp(m->decks[i].to, name) == 0)
      return FAIL(L, n,
                  "program '%s' is the deck rendered from '%s', which is "
                  "written without execute permission; run it through its "
                  "interpreter, e.g. command: [sh, %s]",
                  prog, m->decks[i].template_name, name);
  for (size_t i = 0; i < m->ncopy; i++)
    if (strcmp(base_name(m->copy[i]), name) == 0)
      return 0;
  return FAIL(L, n,
              "program '%s' is run from each run folder, but no file named "
              "'%s' goes there; give the program's full path, or copy it "
              "with model.copy and run it through its interpreter, e.g. "
              "command: [sh, %s]",
              prog, name, name);
}

/* A program named without a '/' must be on PATH, and an absolute path
 * must be an executable file; a relative path with a '/' is resolved in
 * each run folder (e.g. a script copied there) and checked at run time. */
static int check_program(loader_t *L, yaml_node_t *n, const char *prog) {
  if (prog[0] == '/') {
    if (access(prog, X_OK) != 0)
      return FAIL(L, n, "cannot run '%s': %s", prog, strerror(errno));
    return 0;
  }
  if (strchr(prog, '/'))
    return check_run_folder_program(L, n, prog);
  const char *path = getenv("PATH");
  if (!path || !*path)
    path = "/usr/local/bin:/usr/bin:/bin";
  for (const char *p = path; *p;) {
    const char *colon = strchr(p, ':');
    size_t len = colon ? (size_t)(colon - p) : strlen(p);
    char cand[4096];
    snprintf(cand, sizeof cand, "%.*s/%s", (int)(len ? len : 1), len ? p : ".",
             prog);
    struct stat st;
    if (stat(cand, &st) == 0 && S_ISREG(st.st_mode) && access(cand, X_OK) == 0)
      return 0;
    p += len;
    if (*p == ':')
      p++;
  }
  return FAIL(L, n,
              "program '%s' is not on PATH; install it or give its "
              "full path",
              prog);
}

/* Parses each argument of model.command that holds "{{" or "}}" as a
 * template over the variables (and _index, _key, _folder), so that values
 * can be passed as arguments. A mistake is reported at its place in the
 * study file. */
static int load_argument_templates(loader_t *L, yaml_node_t *cn) {
  bk_model_t *m = &L->s->model;
  bk_names_t names = {(const char *const *)L->s->var_names, L->s->nvars};
  for (size_t i = 1; i < m->argc; i++) {
    const char *a = m->argv[i];
    if (!strstr(a, "{{") && !strstr(a, "}}"))
      continue;
    if (!m->argt && !(m->argt = bk_calloc(m->argc, sizeof *m->argt)))
      return nomem(L);
    bk_error_t terr;
    bk_error_clear(&terr);
    int prc = bk_template_parse("model.command", a, strlen(a), &names,
                                &m->argt[i], &terr);
    if (prc == BK_ENOMEM)
      return nomem(L);
    if (prc) {
      /* An argument is one line: the column is the offset in it. */
      yaml_node_t *it = node_at(L, cn->data.sequence.items.start[i]);
      yaml_mark_t mk;
      scalar_offset_mark(L, it, terr.col > 0 ? (size_t)terr.col - 1 : 0, &mk);
      return fail_at(L, &mk, "model.command argument %zu: %s", i, terr.msg);
    }
  }
  return 0;
}

char **bk_study_render_argv(const bk_study_t *s, const bk_template_ctx_t *ctx) {
  const bk_model_t *m = &s->model;
  bk_buf_t b;
  bk_buf_init(&b);
  int rc = 0;
  for (size_t i = 0; rc == 0 && i < m->argc; i++) {
    if (m->argt && m->argt[i])
      rc = bk_template_render(m->argt[i], ctx, &b);
    else
      rc = bk_buf_puts(&b, m->argv[i]);
    if (rc == 0)
      rc = bk_buf_append(&b, "", 1); /* the argument's NUL */
  }
  size_t ptrs = (m->argc + 1) * sizeof(char *);
  char **argv = rc ? NULL : bk_malloc(ptrs + b.len);
  if (argv) {
    char *text = (char *)argv + ptrs;
    memcpy(text, b.data, b.len);
    for (size_t i = 0; i < m->argc; i++) {
      argv[i] = text;
      text += strlen(text) + 1;
    }
    argv[m->argc] = NULL;
  }
  bk_buf_close(&b);
  return argv;
}

/* model.watch, files whose contents are part of the model, and
 * model.version_command, whose output names the model's version: both
 * fingerprinted by every run (eval/fingerprint.h). */
static int load_watch(loader_t *L, yaml_node_t *mn) {
  bk_model_t *m = &L->s->model;
  yaml_node_t *n;
  int rc;
  if ((n = lookup(L, mn, "watch"))) {
    if ((rc = load_string_list(L, n, "model.watch", &m->watch_names,
                               &m->nwatch)))
      return rc;
    m->watch = bk_calloc(m->nwatch + 1, sizeof *m->watch);
    if (!m->watch)
      return nomem(L);
    for (size_t i = 0; i < m->nwatch; i++) {
      yaml_node_t *it = node_at(L, n->data.sequence.items.start[i]);
      struct stat st;
      if (!(m->watch[i] = resolve_path(L->s->dir, m->watch_names[i])))
        return nomem(L);
      if (stat(m->watch[i], &st) != 0)
        return FAIL(L, it,
                    "cannot find '%s' (model.watch names files the "
                    "model reads)",
                    m->watch_names[i]);
      if (!S_ISREG(st.st_mode))
        return FAIL(L, it,
                    "'%s' is %s; model.watch takes files (name each "
                    "file)",
                    m->watch_names[i],
                    S_ISDIR(st.st_mode) ? "a folder" : "not a regular file");
      if (access(m->watch[i], R_OK) != 0)
        return FAIL(L, it, "cannot read '%s': %s", m->watch_names[i],
                    strerror(errno));
    }
  }
  if ((n = lookup(L, mn, "version_command"))) {
    if ((rc = load_string_list(L, n, "model.version_command", &m->version_argv,
                               &m->version_argc)))
      return rc;
    if (m->version_argc == 0)
      return FAIL(L, n,
                  "model.version_command must name a program, e.g. "
                  "[solver, --version]");
    if ((rc = check_program(L, node_at(L, n->data.sequence.items.start[0]),
                            m->version_argv[0])))
      return rc;
  }
  return 0;
}

static int load_model(loader_t *L, yaml_node_t *mn) {
  bk_model_t *m = &L->s->model;
  int rc = want_mapping(L, mn, "model");
  if (rc || (rc = check_keys(L, mn, "model", keys_model)))
    return rc;
  m->present = 1;
  m->max_error_fraction = 0.05;
  m->on_error = BK_ON_ERROR_SKIP;
  m->keep = BK_KEEP_FAILED;
  yaml_node_t *n;
  if ((n = lookup(L, mn, "files")) && (rc = load_decks(L, n)))
    return rc;
  if ((n = lookup(L, mn, "copy"))) {
    if ((rc = load_string_list(L, n, "model.copy", &m->copy_names, &m->ncopy)))
      return rc;
    m->copy = bk_calloc(m->ncopy + 1, sizeof *m->copy);
    if (!m->copy)
      return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
    for (size_t i = 0; i < m->ncopy; i++) {
      m->copy[i] = resolve_path(L->s->dir, m->copy_names[i]);
      yaml_node_t *it = node_at(L, n->data.sequence.items.start[i]);
      if (!m->copy[i])
        return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
      struct stat st;
      if (stat(m->copy[i], &st) != 0)
        return FAIL(L, it, "cannot find '%s' to copy into each run folder",
                    m->copy_names[i]);
      if (!S_ISREG(st.st_mode))
        return FAIL(L, it,
                    "'%s' is %s; model.copy takes files (name each file "
                    "the model needs)",
                    m->copy_names[i],
                    S_ISDIR(st.st_mode) ? "a folder" : "not a regular file");
      if (access(m->copy[i], R_OK) != 0)
        return FAIL(L, it, "cannot read '%s': %s", m->copy_names[i],
                    strerror(errno));
      const char *bn = base_name(m->copy[i]);
      if ((rc = check_run_file_name(L, it, bn, m->ndecks)))
        return rc;
      for (size_t j = 0; j < i; j++)
        if (strcmp(base_name(m->copy[j]), bn) == 0)
          return FAIL(L, it,
                      "'%s' and '%s' would both be copied as '%s' into each "
                      "run folder; give each file its own name",
                      m->copy_names[j], m->copy_names[i], bn);
    }
  }
  if ((rc = load_watch(L, mn)))
    return rc;
  yaml_node_t *cn = lookup(L, mn, "command");
  if (!cn)
    return FAIL(L, mn,
                "model needs a command, e.g. command: [ccx, -i, "
                "beam]");
  if ((rc = load_string_list(L, cn, "model.command", &m->argv, &m->argc)))
    return rc;
  if (m->argc == 0)
    return FAIL(L, cn, "model.command must name a program");
  if (strstr(m->argv[0], "{{"))
    return FAIL(L, node_at(L, cn->data.sequence.items.start[0]),
                "the program '%s' cannot hold a placeholder: it is checked "
                "when the study is loaded; put values in the arguments, e.g. "
                "command: [solver, --load, '{{ q }}']",
                m->argv[0]);
  if ((rc = check_program(L, node_at(L, cn->data.sequence.items.start[0]),
                          m->argv[0])))
    return rc;
  if ((rc = load_argument_templates(L, cn)))
    return rc;
  if ((n = lookup(L, mn, "env"))) {
    if ((rc = want_mapping(L, n, "model.env")) ||
        (rc = check_keys(L, n, "model.env", NULL)))
      return rc;
    size_t cnt =
        (size_t)(n->data.mapping.pairs.top - n->data.mapping.pairs.start);
    m->env = bk_calloc(cnt + 1, sizeof *m->env);
    if (!m->env)
      return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
    for (yaml_node_pair_t *p = n->data.mapping.pairs.start;
         p < n->data.mapping.pairs.top; p++) {
      yaml_node_t *k = node_at(L, p->key), *v = node_at(L, p->value);
      const char *val;
      if (!is_identifier(scalar(k)))
        return FAIL(L, k, "environment variable name '%s' is not valid",
                    scalar(k));
      if ((rc = want_text(L, v, "an environment value", &val)))
        return rc;
      bk_buf_t b;
      bk_buf_init(&b);
      if (bk_buf_printf(&b, "%s=%s", scalar(k), val))
        return nomem(L);
      m->env[m->nenv++] = b.data;
    }
  }
  if ((n = lookup(L, mn, "inherit"))) {
    if ((rc = load_string_list(L, n, "model.inherit", &m->inherit,
                               &m->ninherit)))
      return rc;
    for (size_t i = 0; i < m->ninherit; i++) {
      char *name = m->inherit[i];
      size_t len = strlen(name);
      int star = len > 1 && name[len - 1] == '*';
      if (star)
        name[len - 1] = '\0';
      int ok = is_identifier(name);
      if (star)
        name[len - 1] = '*';
      if (!ok)
        return FAIL(L, node_at(L, n->data.sequence.items.start[i]),
                    "model.inherit takes variable names or prefixes ending "
                    "in '*' (e.g. OMPI_MCA_*); got '%s'",
                    name);
    }
  }
  if ((n = lookup(L, mn, "timeout"))) {
    if ((rc = want_number(L, n, "model.timeout", &m->timeout)))
      return rc;
    if (!(m->timeout > 0))
      return FAIL(L, n, "model.timeout must be > 0 seconds (got %g)",
                  m->timeout);
  }
  if ((n = lookup(L, mn, "retries"))) {
    uint64_t r;
    if ((rc = want_count(L, n, "model.retries", 0, &r)))
      return rc;
    if (r > 100)
      return FAIL(L, n, "model.retries must be at most 100");
    m->retries = (int)r;
  }
  if ((n = lookup(L, mn, "on_error"))) {
    const char *t;
    if ((rc = want_text(L, n, "model.on_error", &t)))
      return rc;
    if (strcmp(t, "skip") == 0)
      m->on_error = BK_ON_ERROR_SKIP;
    else if (strcmp(t, "fail") == 0)
      m->on_error = BK_ON_ERROR_FAIL;
    else if (strcmp(t, "abort") == 0)
      m->on_error = BK_ON_ERROR_ABORT;
    else
      return FAIL(L, n, "model.on_error must be skip, fail or abort; got '%s'",
                  t);
  }
  if ((n = lookup(L, mn, "max_error_fraction"))) {
    if ((rc = want_number(L, n, "model.max_error_fraction",
                          &m->max_error_fraction)))
      return rc;
    if (!(m->max_error_fraction >= 0 && m->max_error_fraction <= 1))
      return FAIL(L, n,
                  "model.max_error_fraction must be between 0 and 1 "
                  "(got %g)",
                  m->max_error_fraction);
  }
  if ((n = lookup(L, mn, "keep"))) {
    const char *t;
    if ((rc = want_text(L, n, "model.keep", &t)))
      return rc;
    static const char *const kn[] = {"all", "failed", "errors", "none"};
    int found = -1;
    for (int i = 0; i < 4; i++)
      if (strcmp(t, kn[i]) == 0)
        found = i;
    if (found < 0)
      return FAIL(L, n,
                  "model.keep must be all, failed, errors or none; got "
                  "'%s'",
                  t);
    m->keep = (bk_keep_t)found;
  }
  if ((n = lookup(L, mn, "outputs")) && (rc = load_outputs(L, n)))
    return rc;
  return 0;
}

/* ---- analysis and run ----------------------------------------------- */

static int want_positive(loader_t *L, yaml_node_t *n, const char *what,
                         double *out) {
  int rc = want_number(L, n, what, out);
  if (rc == 0 && !(*out > 0))
    return FAIL(L, n, "%s must be > 0 (got %g)", what, *out);
  return rc;
}

static int want_int_range(loader_t *L, yaml_node_t *n, const char *what, int lo,
                          int hi, int *out) {
  uint64_t v;
  int rc = want_count(L, n, what, (uint64_t)lo, &v);
  if (rc)
    return rc;
  if (v > (uint64_t)hi)
    return FAIL(L, n, "%s must be at most %d (got %llu)", what, hi,
                (unsigned long long)v);
  *out = (int)v;
  return 0;
}

/* A boolean written true or false. */
static int want_bool(loader_t *L, yaml_node_t *n, const char *what, int *out) {
  const char *t;
  int rc = want_text(L, n, what, &t);
  if (rc)
    return rc;
  if (strcmp(t, "true") == 0)
    *out = 1;
  else if (strcmp(t, "false") == 0)
    *out = 0;
  else
    return FAIL(L, n, "%s must be true or false; got '%s'", what, t);
  return 0;
}

/* One of two words; *out is 0 for the first, 1 for the second. */
static int want_choice(loader_t *L, yaml_node_t *n, const char *what,
                       const char *w0, const char *w1, int *out) {
  const char *t;
  int rc = want_text(L, n, what, &t);
  if (rc)
    return rc;
  if (strcmp(t, w0) == 0)
    *out = 0;
  else if (strcmp(t, w1) == 0)
    *out = 1;
  else
    return FAIL(L, n, "%s must be %s or %s; got '%s'", what, w0, w1, t);
  return 0;
}

/* analysis.surrogate (see bk_surrogate_opts_t). */
static int load_surrogate_options(loader_t *L, yaml_node_t *m) {
  bk_surrogate_opts_t *o = &L->s->analysis.surrogate;
  int rc;
  yaml_node_t *n;
  if ((rc = want_mapping(L, m, "analysis.surrogate")) ||
      (rc = check_keys(L, m, "analysis.surrogate", keys_surrogate)))
    return rc;
  if ((n = lookup(L, m, "batch")) &&
      (rc = want_int_range(L, n, "analysis.surrogate.batch", 1, 4096,
                           &o->batch)))
    return rc;
  if ((n = lookup(L, m, "start_points")) &&
      (rc = want_int_range(L, n, "analysis.surrogate.start_points", 2, 100000,
                           &o->start)))
    return rc;
  if ((n = lookup(L, m, "trend"))) {
    const char *t;
    if ((rc = want_text(L, n, "analysis.surrogate.trend", &t)))
      return rc;
    if (strcmp(t, "constant") == 0)
      o->trend = 0;
    else if (strcmp(t, "linear") == 0)
      o->trend = 1;
    else if (strcmp(t, "auto") == 0)
      o->trend = 2;
    else
      return FAIL(L, n,
                  "analysis.surrogate.trend must be auto, constant or "
                  "linear; got '%s'",
                  t);
  }
  if ((n = lookup(L, m, "noisy")) &&
      (rc = want_bool(L, n, "analysis.surrogate.noisy", &o->noisy)))
    return rc;
  if ((n = lookup(L, m, "pick_by")) &&
      (rc = want_choice(L, n, "analysis.surrogate.pick_by", "u", "eff",
                        &o->eff)))
    return rc;
  if ((n = lookup(L, m, "spread")) &&
      (rc = want_choice(L, n, "analysis.surrogate.spread", "clusters",
                        "believer", &o->believer)))
    return rc;
  if ((n = lookup(L, m, "training_share"))) {
    if ((rc = want_number(L, n, "analysis.surrogate.training_share",
                          &o->train_share)))
      return rc;
    if (!(o->train_share > 0 && o->train_share < 1))
      return FAIL(L, n,
                  "analysis.surrogate.training_share must lie between 0 "
                  "and 1 (got %g), e.g. 0.6",
                  o->train_share);
  }
  return 0;
}

/* The method sections analysis.form, .importance, .cross_entropy, .subset
 * and .surrogate, each optional, with their defaults. */
static int load_method_options(loader_t *L, yaml_node_t *an) {
  bk_analysis_t *a = &L->s->analysis;
  a->form.step = 1e-3;
  a->form.central = 0;
  a->form.max_iterations = 100;
  a->form.tolerance = 1e-3;
  a->form.sorm = 0;
  a->form.explore = 1;
  a->form.searches = 0;
  a->form.probe = -1;
  a->importance.defensive = 0.1;
  a->cross_entropy.components = 1;
  a->cross_entropy.rho = 0.1;
  a->cross_entropy.max_steps = 30;
  a->subset.p0 = 0.1;
  a->subset.max_levels = 20;
  a->surrogate.trend = 2;
  a->surrogate.train_share = 0.6;
  if (!an)
    return 0;
  int rc;
  yaml_node_t *m, *n;
  if ((m = lookup(L, an, "form"))) {
    if ((rc = want_mapping(L, m, "analysis.form")) ||
        (rc = check_keys(L, m, "analysis.form", keys_form)))
      return rc;
    if ((n = lookup(L, m, "step")) &&
        (rc = want_positive(L, n, "analysis.form.step", &a->form.step)))
      return rc;
    if ((n = lookup(L, m, "tolerance")) &&
        (rc = want_positive(L, n, "analysis.form.tolerance",
                            &a->form.tolerance)))
      return rc;
    if ((n = lookup(L, m, "max_iterations")) &&
        (rc = want_int_range(L, n, "analysis.form.max_iterations", 1, 10000,
                             &a->form.max_iterations)))
      return rc;
    if ((n = lookup(L, m, "differences"))) {
      const char *t;
      if ((rc = want_text(L, n, "analysis.form.differences", &t)))
        return rc;
      if (strcmp(t, "central") == 0)
        a->form.central = 1;
      else if (strcmp(t, "forward") != 0)
        return FAIL(L, n,
                    "analysis.form.differences must be forward or "
                    "central; got '%s'",
                    t);
    }
    if ((n = lookup(L, m, "sorm"))) {
      const char *t;
      if ((rc = want_text(L, n, "analysis.form.sorm", &t)))
        return rc;
      if (strcmp(t, "true") == 0)
        a->form.sorm = 1;
      else if (strcmp(t, "false") != 0)
        return FAIL(L, n,
                    "analysis.form.sorm must be true or false; got "
                    "'%s'",
                    t);
    }
    if ((n = lookup(L, m, "explore"))) {
      const char *t;
      if ((rc = want_text(L, n, "analysis.form.explore", &t)))
        return rc;
      if (strcmp(t, "false") == 0)
        a->form.explore = 0;
      else if (strcmp(t, "true") != 0)
        return FAIL(L, n,
                    "analysis.form.explore must be true or false; got "
                    "'%s'",
                    t);
    }
    if ((n = lookup(L, m, "searches")) &&
        (rc = want_int_range(L, n, "analysis.form.searches", 1, 64,
                             &a->form.searches)))
      return rc;
    if ((n = lookup(L, m, "probe")) &&
        (rc = want_int_range(L, n, "analysis.form.probe", 0, 100000,
                             &a->form.probe)))
      return rc;
  }
  if ((m = lookup(L, an, "importance"))) {
    if ((rc = want_mapping(L, m, "analysis.importance")) ||
        (rc = check_keys(L, m, "analysis.importance", keys_importance)))
      return rc;
    if ((n = lookup(L, m, "center"))) {
      bk_study_t *s = L->s;
      if ((rc = want_mapping(L, n, "analysis.importance.center")) ||
          (rc = check_keys(L, n, "analysis.importance.center", NULL)))
        return rc;
      a->importance.center = bk_calloc(s->nvars, sizeof(double));
      if (!a->importance.center)
        return bk_error_set(L->err, BK_ENOMEM, L->path, 0, 0, "out of memory");
      for (size_t i = 0; i < s->nvars; i++)
        a->importance.center[i] = bk_dist_median(&s->vars[i].dist);
      for (yaml_node_pair_t *p = n->data.mapping.pairs.start;
           p < n->data.mapping.pairs.top; p++) {
        yaml_node_t *k = node_at(L, p->key), *v = node_at(L, p->value);
        int idx = var_index(s, scalar(k));
        if (idx < 0)
          return FAIL(L, k,
                      "unknown variable '%s' in "
                      "analysis.importance.center",
                      scalar(k));
        if ((rc = want_number(L, v, "a design-point coordinate",
                              &a->importance.center[idx])))
          return rc;
      }
      a->importance.has_center = 1;
    }
    if ((n = lookup(L, m, "defensive"))) {
      if ((rc = want_number(L, n, "analysis.importance.defensive",
                            &a->importance.defensive)))
        return rc;
      if (!(a->importance.defensive >= 0 && a->importance.defensive < 1))
        return FAIL(L, n,
                    "analysis.importance.defensive must lie in [0, 1) "
                    "(got %g), e.g. 0.1",
                    a->importance.defensive);
    }
  }
  if ((m = lookup(L, an, "cross_entropy"))) {
    if ((rc = want_mapping(L, m, "analysis.cross_entropy")) ||
        (rc = check_keys(L, m, "analysis.cross_entropy", keys_ce)))
      return rc;
    if ((n = lookup(L, m, "components")) &&
        (rc = want_int_range(L, n, "analysis.cross_entropy.components", 1, 64,
                             &a->cross_entropy.components)))
      return rc;
    if ((n = lookup(L, m, "max_steps")) &&
        (rc = want_int_range(L, n, "analysis.cross_entropy.max_steps", 1, 1000,
                             &a->cross_entropy.max_steps)))
      return rc;
    if ((n = lookup(L, m, "rho"))) {
      if ((rc = want_number(L, n, "analysis.cross_entropy.rho",
                            &a->cross_entropy.rho)))
        return rc;
      if (!(a->cross_entropy.rho > 0 && a->cross_entropy.rho < 0.5))
        return FAIL(L, n,
                    "analysis.cross_entropy.rho must lie between 0 "
                    "and 0.5 (got %g), e.g. 0.1",
                    a->cross_entropy.rho);
    }
  }
  if ((m = lookup(L, an, "subset"))) {
    if ((rc = want_mapping(L, m, "analysis.subset")) ||
        (rc = check_keys(L, m, "analysis.subset", keys_subset)))
      return rc;
    if ((n = lookup(L, m, "max_levels")) &&
        (rc = want_int_range(L, n, "analysis.subset.max_levels", 1, 100,
                             &a->subset.max_levels)))
      return rc;
    if ((n = lookup(L, m, "p0"))) {
      if ((rc = want_number(L, n, "analysis.subset.p0", &a->subset.p0)))
        return rc;
      if (!(a->subset.p0 > 0 && a->subset.p0 <= 0.5))
        return FAIL(L, n,
                    "analysis.subset.p0 must lie in (0, 0.5] (got "
                    "%g), e.g. 0.1",
                    a->subset.p0);
    }
  }
  if ((m = lookup(L, an, "surrogate")) && (rc = load_surrogate_options(L, m)))
    return rc;
  return 0;
}

static int load_analysis(loader_t *L, yaml_node_t *an) {
  bk_analysis_t *a = &L->s->analysis;
  int rc;
  yaml_node_t *n;
  if (an) {
    if ((rc = want_mapping(L, an, "analysis")) ||
        (rc = check_keys(L, an, "analysis", keys_analysis)))
      return rc;
  }
  a->method = BK_METHOD_RANDOM;
  a->ci_level = 0.95;
  if (an && (n = lookup(L, an, "method"))) {
    const char *t;
    if ((rc = want_text(L, n, "analysis.method", &t)))
      return rc;
    int found = -1;
    for (int i = 0; i < BK_METHOD__COUNT; i++)
      if (strcmp(t, method_names[i]) == 0)
        found = i;
    if (found < 0)
      return FAIL(L, n,
                  "unknown method '%s'; expected one of random, lhs, "
                  "sobol, form, importance, cross-entropy, subset, "
                  "surrogate",
                  t);
    a->method = (bk_method_kind_t)found;
  }
  yaml_node_t *sn = an ? lookup(L, an, "samples") : NULL;
  if (sn && (rc = want_count(L, sn, "analysis.samples", 1, &a->samples)))
    return rc;
  if (an && (n = lookup(L, an, "target_cov"))) {
    if ((rc = want_number(L, n, "analysis.target_cov", &a->target_cov)))
      return rc;
    if (!(a->target_cov > 0))
      return FAIL(L, n, "analysis.target_cov must be > 0 (got %g)",
                  a->target_cov);
  }
  if (an && (n = lookup(L, an, "max_evaluations"))) {
    if ((rc = want_count(L, n, "analysis.max_evaluations", 1,
                         &a->max_evaluations)))
      return rc;
  }
  if (an && (n = lookup(L, an, "target_beta"))) {
    if ((rc = want_number(L, n, "analysis.target_beta", &a->target_beta)))
      return rc;
    a->has_target_beta = 1;
  }
  if (an && (n = lookup(L, an, "ci_level"))) {
    if ((rc = want_number(L, n, "analysis.ci_level", &a->ci_level)))
      return rc;
    if (!(a->ci_level >= 0.5 && a->ci_level < 1))
      return FAIL(L, n,
                  "analysis.ci_level must be at least 0.5 and below 1 "
                  "(got %g), e.g. 0.95",
                  a->ci_level);
  }
  if ((rc = load_method_options(L, an)))
    return rc;
  int replicated = a->method == BK_METHOD_LHS || a->method == BK_METHOD_SOBOL;
  yaml_node_t *rn = an ? lookup(L, an, "replicates") : NULL;
  a->replicates = 1;
  if (rn) {
    uint64_t r;
    if (!replicated)
      return FAIL(L, rn, "analysis.replicates applies to lhs and sobol only");
    if ((rc = want_count(L, rn, "analysis.replicates", 2, &r)))
      return rc;
    if (r > 100000)
      return FAIL(L, rn, "analysis.replicates must be at most 100000");
    a->replicates = (uint32_t)r;
  } else if (replicated) {
    a->replicates = 8;
  }
  if (replicated) {
    if (!a->samples)
      return FAIL(L, an ? an : node_at(L, 1),
                  "method %s needs analysis.samples (the total number of "
                  "evaluations, split over the replicates)",
                  method_names[a->method]);
    if (a->samples < a->replicates)
      return FAIL(L, sn,
                  "analysis.samples (%llu) must be at least the "
                  "number of replicates (%u)",
                  (unsigned long long)a->samples, a->replicates);
  } else if (a->method == BK_METHOD_RANDOM && !a->samples && !a->target_cov) {
    return FAIL(L, an ? an : node_at(L, 1),
                "give analysis.samples (the number of evaluations) or "
                "analysis.target_cov (stop once the estimate is that "
                "precise)");
  }
  switch (a->method) {
  case BK_METHOD_IMPORTANCE:
  case BK_METHOD_CROSS_ENTROPY:
    /* samples: evaluations per batch; stop on target_cov. Cross-entropy
     * fits a density of nu dimensions from each batch and needs about 100
     * points per variable to do so reliably (measured on a sum of 20
     * exponentials, bench/bench_rare). */
    if (!a->samples) {
      size_t nu = bk_transform_nu(L->s->transform);
      a->samples = 500;
      if (a->method == BK_METHOD_CROSS_ENTROPY && 100 * nu > a->samples)
        a->samples = 100 * nu;
    }
    if (!(a->target_cov > 0))
      a->target_cov = 0.1;
    if (!a->max_evaluations)
      a->max_evaluations = 200000;
    break;
  case BK_METHOD_SUBSET:
    if (!a->samples)
      a->samples = 1000; /* per level */
    if (!a->max_evaluations)
      a->max_evaluations = 10000000;
    break;
  case BK_METHOD_FORM:
    if (!a->max_evaluations)
      a->max_evaluations = 1000000;
    break;
  case BK_METHOD_SURROGATE:
    /* Learning batches and correction batches are sized by
     * analysis.surrogate.batch; samples has no meaning here. */
    if (sn)
      return FAIL(L, sn,
                  "analysis.samples does not apply to method surrogate "
                  "(model runs per iteration are "
                  "analysis.surrogate.batch; the total is "
                  "analysis.max_evaluations)");
    if (!(a->target_cov > 0))
      a->target_cov = 0.1;
    if (!a->max_evaluations)
      a->max_evaluations = 500;
    break;
  default:
    if (!a->max_evaluations)
      a->max_evaluations = a->samples ? a->samples : 10000000;
  }
  return 0;
}

/* The key `key` itself (not its value) in mapping `m`, or NULL. */
static yaml_node_t *key_node(loader_t *L, yaml_node_t *m, const char *key) {
  if (!m || m->type != YAML_MAPPING_NODE)
    return NULL;
  for (yaml_node_pair_t *p = m->data.mapping.pairs.start;
       p < m->data.mapping.pairs.top; p++) {
    yaml_node_t *k = node_at(L, p->key);
    if (k->type == YAML_SCALAR_NODE && strcmp(scalar(k), key) == 0)
      return k;
  }
  return NULL;
}

/* The checks that join several keys and the methods' defaults: whatever
 * would stop a run at its start, or let it run without giving an estimate,
 * is refused here, so that `brink check` and `brink run` agree. Each error
 * points at the key to change: the one given, else the section. */
static int check_design(loader_t *L, yaml_node_t *root) {
  bk_study_t *s = L->s;
  const bk_analysis_t *a = &s->analysis;
  yaml_node_t *an = lookup(L, root, "analysis");
  yaml_node_t *sn = an ? lookup(L, an, "samples") : NULL;
  yaml_node_t *men = an ? lookup(L, an, "max_evaluations") : NULL;
  yaml_node_t *mn = an ? lookup(L, an, "method") : NULL;
  yaml_node_t *at_an = an ? an : root;
  const char *method = method_names[a->method];
  size_t nu = bk_transform_nu(s->transform);
  unsigned long long N = (unsigned long long)a->samples;
  unsigned long long maxe = (unsigned long long)a->max_evaluations;
  if (nu == 0) {
    yaml_node_t *vk = key_node(L, root, "variables");
    return FAIL(L, vk ? vk : root,
                "every variable is a constant, so method %s has nothing "
                "random to work on; give at least one variable a "
                "distribution",
                method);
  }
  switch (a->method) {
  case BK_METHOD_LHS:
  case BK_METHOD_SOBOL: {
    unsigned long long per = N / a->replicates;
    if (a->method == BK_METHOD_SOBOL && nu > BK_SOBOL_MAXDIM)
      return FAIL(L, mn ? mn : at_an,
                  "sobol supports at most %d random variables (the study "
                  "has %zu); use lhs or random",
                  BK_SOBOL_MAXDIM, nu);
    if (a->method == BK_METHOD_SOBOL && per > BK_SOBOL_MAXPOINTS)
      return FAIL(L, sn ? sn : at_an,
                  "sobol takes at most %llu points per replicate (got %llu: "
                  "analysis.samples %llu over %u replicates); give more "
                  "replicates or fewer samples",
                  (unsigned long long)BK_SOBOL_MAXPOINTS, per, N,
                  a->replicates);
    if (maxe < per)
      return FAIL(L, men ? men : at_an,
                  "analysis.max_evaluations (%llu) is below one replicate "
                  "(%llu points: analysis.samples %llu over %u "
                  "replicates), so nothing would run; raise it",
                  maxe, per, N, a->replicates);
    break;
  }
  case BK_METHOD_FORM:
  case BK_METHOD_IMPORTANCE: {
    if (a->method == BK_METHOD_IMPORTANCE && a->importance.has_center) {
      yaml_node_t *im = lookup(L, an, "importance");
      yaml_node_t *cn = lookup(L, im, "center");
      for (yaml_node_pair_t *p = cn->data.mapping.pairs.start;
           p < cn->data.mapping.pairs.top; p++) {
        int i = var_index(s, scalar(node_at(L, p->key)));
        const bk_dist_t *d = &s->vars[i].dist;
        double x = a->importance.center[i];
        if (d->kind != BK_DIST_CONSTANT && !isfinite(bk_dist_to_u(d, x)))
          return FAIL(L, node_at(L, p->value),
                      "analysis.importance.center: %s = %g lies outside "
                      "the range of its %s distribution; give a value it "
                      "can take",
                      s->vars[i].name, x, bk_dist_name(d->kind));
      }
      break;
    }
    /* The design-point search needs room for one iteration: the point
     * and its gradient (method_form.c). */
    unsigned long long iter =
        (unsigned long long)(a->form.central ? 2 * nu : nu) + 1;
    if (maxe < iter)
      return FAIL(L, men ? men : at_an,
                  "analysis.max_evaluations (%llu) is below one FORM "
                  "iteration (%llu evaluations: the point and its %s "
                  "differences), so the design-point search cannot start; "
                  "raise it",
                  maxe, iter, a->form.central ? "central" : "forward");
    break;
  }
  case BK_METHOD_CROSS_ENTROPY:
    if (N < 2)
      return FAIL(L, sn ? sn : at_an,
                  "cross-entropy needs analysis.samples of at least 2 "
                  "(points per step)");
    /* An adaptation step and a final batch (method_cross_entropy.c). */
    if (maxe < 2 * N)
      return FAIL(L,
                  men  ? men
                  : sn ? sn
                       : at_an,
                  "analysis.max_evaluations (%llu%s) leaves no room for "
                  "cross-entropy with %llu points per step: one adaptation "
                  "step and one final batch need %llu; %s",
                  maxe, men ? "" : ", the default", N, 2 * N,
                  men ? "raise it"
                      : "give a larger analysis.max_evaluations or fewer "
                        "samples");
    break;
  case BK_METHOD_SUBSET: {
    yaml_node_t *sub = an ? lookup(L, an, "subset") : NULL;
    yaml_node_t *pn = sub ? lookup(L, sub, "p0") : NULL;
    /* The seeds of each level (method_subset.c). */
    unsigned long long nc =
        (unsigned long long)floor(a->subset.p0 * (double)N + 0.5);
    if (nc < 1 || nc >= N)
      return FAIL(L,
                  sn   ? sn
                  : pn ? pn
                       : at_an,
                  "subset simulation needs analysis.samples * "
                  "analysis.subset.p0 between 1 and the samples (got %llu "
                  "samples, p0 %g); give more samples",
                  N, a->subset.p0);
    if (maxe < N)
      return FAIL(L,
                  men  ? men
                  : sn ? sn
                       : at_an,
                  "analysis.max_evaluations (%llu) is below one level of "
                  "subset simulation (analysis.samples, %llu points); "
                  "raise it",
                  maxe, N);
    break;
  }
  default:
    break;
  }
  return 0;
}

static int load_run(loader_t *L, yaml_node_t *rn) {
  bk_run_t *r = &L->s->run;
  int rc;
  yaml_node_t *n;
  if (rn && ((rc = want_mapping(L, rn, "run")) ||
             (rc = check_keys(L, rn, "run", keys_run))))
    return rc;
  r->threads = r->ranks = 1;
  static const struct {
    const char *key;
    const char *what;
    int most;
  } counts[] = {{"slots", "run.slots", 4096},
                {"threads", "run.threads", 4096},
                {"ranks", "run.ranks", 65536}};
  int *into[] = {&r->slots, &r->threads, &r->ranks};
  for (int i = 0; i < 3; i++) {
    if (!rn || !(n = lookup(L, rn, counts[i].key)))
      continue;
    uint64_t v;
    if ((rc = want_count(L, n, counts[i].what, 1, &v)))
      return rc;
    if (v > (uint64_t)counts[i].most)
      return FAIL(L, n, "%s must be at most %d", counts[i].what,
                  counts[i].most);
    *into[i] = (int)v;
    if (i == 0)
      r->slots_given = 1;
  }
  if ((long)r->threads * r->ranks > 65536)
    return FAIL(L, rn, "run.threads x run.ranks must be at most 65536");
  r->cores = r->threads * r->ranks;
  r->launch = BK_LAUNCH_DIRECT;
  if (rn && (n = lookup(L, rn, "launch"))) {
    const char *t;
    if ((rc = want_text(L, n, "run.launch", &t)))
      return rc;
    if (strcmp(t, "srun") == 0)
      r->launch = BK_LAUNCH_SRUN;
    else if (strcmp(t, "direct") != 0)
      return FAIL(L, n, "run.launch must be direct or srun; got '%s'", t);
  }
  bk_study_default_slots(L->s, bk_study_available_cores(L->s));
  const char *folder = NULL;
  if (rn && (n = lookup(L, rn, "folder")) &&
      (rc = want_text(L, n, "run.folder", &folder)))
    return rc;
  if (folder) {
    r->folder = resolve_path(L->s->dir, folder);
  } else {
    bk_buf_t b;
    bk_buf_init(&b);
    if (bk_buf_printf(&b, "runs/%s", L->s->name) == 0)
      r->folder = resolve_path(L->s->dir, b.data);
    bk_buf_close(&b);
  }
  if (!r->folder)
    return nomem(L);
  const char *scratch = "";
  if (rn && (n = lookup(L, rn, "scratch")) &&
      (rc = want_text(L, n, "run.scratch", &scratch)))
    return rc;
  r->scratch = scratch[0] ? resolve_path(L->s->dir, scratch) : bk_strdup("");
  return r->scratch ? 0 : nomem(L);
}

/* ---- limit state ---------------------------------------------------- */

const char **bk_study_g_names(const bk_study_t *s, size_t *n) {
  size_t total = s->nvars + s->model.noutputs;
  const char **names = bk_calloc(total ? total : 1, sizeof *names);
  if (!names)
    return NULL;
  for (size_t i = 0; i < s->nvars; i++)
    names[i] = s->vars[i].name;
  for (size_t i = 0; i < s->model.noutputs; i++)
    names[s->nvars + i] = s->model.outputs[i].name;
  *n = total;
  return names;
}

/* Compiles the expression of scalar `n` over `tab`; `what` names it in a
 * message ("limit_state", "limit_states.bending", "system"). */
static int compile_at(loader_t *L, yaml_node_t *n, const char *what,
                      const char *text, const bk_names_t *tab,
                      bk_expr_t **out) {
  char msg[400] = "";
  size_t off = 0;
  int rc = bk_expr_compile(text, strlen(text), tab, out, msg, sizeof msg, &off);
  if (rc == BK_ENOMEM)
    return nomem(L);
  if (rc) {
    yaml_mark_t mk;
    scalar_offset_mark(L, n, off, &mk);
    return fail_at(L, &mk, "%s: %s", what, msg);
  }
  return 0;
}

/* limit_states: NAME: "expression", ...; and system:. */
static int load_limit_states(loader_t *L, yaml_node_t *ln, yaml_node_t *sn) {
  bk_study_t *s = L->s;
  int rc;
  if ((rc = want_mapping(L, ln, "limit_states")) ||
      (rc = check_keys(L, ln, "limit_states", NULL)))
    return rc;
  size_t n =
      (size_t)(ln->data.mapping.pairs.top - ln->data.mapping.pairs.start);
  if (n == 0)
    return FAIL(L, ln,
                "limit_states needs at least one entry, e.g. "
                "limit_states: {bending: \"r - s\"}");
  if (n > BK_STUDY_MAX_MODES)
    return FAIL(L, ln, "limit_states holds %zu entries; at most %d are allowed",
                n, BK_STUDY_MAX_MODES);
  s->modes = bk_calloc(n, sizeof *s->modes);
  if (!s->modes)
    return nomem(L);
  size_t nn;
  const char **names = bk_study_g_names(s, &nn);
  if (!names)
    return nomem(L);
  bk_names_t tab = {names, nn};
  rc = 0;
  for (yaml_node_pair_t *p = ln->data.mapping.pairs.start;
       !rc && p < ln->data.mapping.pairs.top; p++) {
    yaml_node_t *k = node_at(L, p->key), *v = node_at(L, p->value);
    const char *name = scalar(k), *text;
    if (strlen(name) > 40) {
      rc = FAIL(L, k,
                "limit state name '%.40s...' is longer than 40 characters "
                "(it is part of evaluation keys)",
                name);
      break;
    }
    if (!is_identifier(name)) {
      rc = FAIL(L, k,
                "limit state name '%s' must start with a letter or '_' and "
                "hold only letters, digits and '_' (the system expression "
                "uses it)",
                name);
      break;
    }
    if (strcmp(name, "series") == 0 || strcmp(name, "parallel") == 0) {
      rc = FAIL(L, k,
                "'%s' names a kind of system; give the limit state another "
                "name",
                name);
      break;
    }
    static const char *const columns[] = {
        "g",        "limit_state", "key",  "failed", "status",
        "attempts", "seconds",     "host", "reason", "folder"};
    for (size_t i = 0; !rc && i < sizeof columns / sizeof *columns; i++)
      if (strcmp(name, columns[i]) == 0)
        rc = FAIL(L, k,
                  "'%s' names a column of `brink export`; give the limit "
                  "state another name",
                  name);
    if (rc)
      break;
    for (size_t i = 0; i < nn; i++)
      if (strcmp(names[i], name) == 0) {
        rc = FAIL(L, k,
                  "limit state name '%s' is already the name of a %s; give "
                  "it another name",
                  name, i < s->nvars ? "variable" : "model output");
        break;
      }
    if (rc)
      break;
    char what[160];
    snprintf(what, sizeof what, "limit_states.%s", name);
    if ((rc = want_text(L, v, what, &text)))
      break;
    bk_mode_t *m = &s->modes[s->nmodes++];
    m->name = bk_strdup(name);
    m->text = bk_strdup(text);
    if (!m->name || !m->text) {
      rc = nomem(L);
      break;
    }
    rc = compile_at(L, v, what, text, &tab, &m->g);
  }
  bk_free(names);
  if (rc)
    return rc;
  const char *sys = "series";
  if (sn && (rc = want_text(L, sn, "system", &sys)))
    return rc;
  s->limit_state = bk_strdup(sys);
  if (!s->limit_state)
    return nomem(L);
  s->nsystem = s->nmodes;
  if (strcmp(sys, "series") == 0) {
    s->system = BK_SYSTEM_SERIES;
    return 0;
  }
  if (strcmp(sys, "parallel") == 0) {
    s->system = BK_SYSTEM_PARALLEL;
    return 0;
  }
  s->system = BK_SYSTEM_EXPR;
  const char *mnames[BK_STUDY_MAX_MODES];
  for (size_t i = 0; i < s->nmodes; i++)
    mnames[i] = s->modes[i].name;
  bk_names_t mtab = {mnames, s->nmodes};
  return compile_at(L, sn,
                    "system (series, parallel, or an expression "
                    "over the limit_states names)",
                    sys, &mtab, &s->system_g);
}

double bk_study_system(const bk_study_t *s, const double *gc) {
  double g;
  switch (s->system) {
  case BK_SYSTEM_EXPR:
    return bk_expr_eval(s->system_g, gc);
  case BK_SYSTEM_PARALLEL:
    /* As max() in an expression: NaN propagates, of equal values the
     * first. */
    g = gc[0];
    for (size_t i = 1; i < s->nsystem; i++)
      g = isnan(g) || isnan(gc[i]) ? g + gc[i] : gc[i] > g ? gc[i] : g;
    return g;
  case BK_SYSTEM_SERIES:
  default:
    g = gc[0];
    for (size_t i = 1; i < s->nsystem; i++)
      g = isnan(g) || isnan(gc[i]) ? g + gc[i] : gc[i] < g ? gc[i] : g;
    return g;
  }
}

double bk_study_g(const bk_study_t *s, const double *vals, double *gc) {
  if (!s->nmodes)
    return bk_expr_eval(s->g, vals);
  double own[BK_STUDY_MAX_MODES];
  double *c = gc ? gc : own;
  for (size_t i = 0; i < s->nmodes; i++)
    c[i] = bk_expr_eval(s->modes[i].g, vals);
  if (s->system == BK_SYSTEM_SINGLE)
    return bk_expr_eval(s->g, vals);
  return bk_study_system(s, c);
}

int bk_study_set_limit_state(bk_study_t *s, const char *name, const char *expr,
                             char *msg, size_t cap) {
  if (!is_identifier(name)) {
    snprintf(msg, cap,
             "'%s' is not a limit state name (letters, digits and _, "
             "starting with a letter)",
             name);
    return BK_EINVAL;
  }
  size_t n;
  const char **names = bk_study_g_names(s, &n);
  if (!names) {
    snprintf(msg, cap, "out of memory");
    return BK_ENOMEM;
  }
  for (size_t i = 0; i < n; i++)
    if (strcmp(names[i], name) == 0) {
      snprintf(msg, cap, "'%s' is the name of a %s, not of a limit state", name,
               i < s->nvars ? "variable" : "model output");
      bk_free(names);
      return BK_EINVAL;
    }
  bk_names_t tab = {names, n};
  bk_expr_t *g = NULL;
  char why[400] = "";
  int rc = bk_expr_compile(expr, strlen(expr), &tab, &g, why, sizeof why, NULL);
  bk_free(names);
  if (rc) {
    snprintf(msg, cap, "%s: %s", name, why);
    return rc;
  }
  char *text = bk_strdup(expr);
  if (!text) {
    bk_expr_free(g);
    snprintf(msg, cap, "out of memory");
    return BK_ENOMEM;
  }
  if (!s->nmodes && strcmp(name, "limit_state") == 0) {
    bk_expr_free(s->g);
    bk_free(s->limit_state);
    s->g = g;
    s->limit_state = text;
    return 0;
  }
  for (size_t i = 0; i < s->nmodes; i++)
    if (strcmp(s->modes[i].name, name) == 0) {
      bk_expr_free(s->modes[i].g);
      bk_free(s->modes[i].text);
      s->modes[i].g = g;
      s->modes[i].text = text;
      return 0;
    }
  char *nm = bk_strdup(name);
  bk_mode_t *m = s->nmodes < BK_STUDY_MAX_MODES
                     ? bk_realloc(s->modes, (s->nmodes + 1) * sizeof *m)
                     : NULL;
  if (!m || !nm) {
    if (m)
      s->modes = m;
    bk_free(nm);
    bk_free(text);
    bk_expr_free(g);
    snprintf(msg, cap,
             s->nmodes < BK_STUDY_MAX_MODES ? "out of memory"
                                            : "at most %d limit states",
             BK_STUDY_MAX_MODES);
    return s->nmodes < BK_STUDY_MAX_MODES ? BK_ENOMEM : BK_EINVAL;
  }
  s->modes = m;
  m[s->nmodes++] = (bk_mode_t){nm, text, g};
  return 0;
}

static int load_limit_state(loader_t *L, yaml_node_t *gn) {
  bk_study_t *s = L->s;
  const char *text;
  int rc = want_text(L, gn, "limit_state", &text);
  if (rc)
    return rc;
  s->limit_state = bk_strdup(text);
  if (!s->limit_state)
    return nomem(L);
  size_t n;
  const char **names = bk_study_g_names(s, &n);
  if (!names)
    return nomem(L);
  bk_names_t tab = {names, n};
  rc = compile_at(L, gn, "limit_state", text, &tab, &s->g);
  bk_free(names);
  return rc;
}

/* ---- fingerprint ---------------------------------------------------- */

/* The canonical text of what determines each evaluation's response: the
 * probabilistic model, seed, limit state and design (not run settings or
 * stopping rules, which may change between a run and its resume). */
static int make_digests(bk_study_t *s) {
  bk_buf_t b;
  bk_buf_init(&b);
  int bad = 0; /* a failed append: the text is incomplete */
  bad |= bk_buf_printf(&b, "seed %llu\n", (unsigned long long)s->seed);
  for (size_t i = 0; i < s->nvars; i++) {
    const bk_dist_t *d = &s->vars[i].dist;
    bad |=
        bk_buf_printf(&b, "var %s %s", s->vars[i].name, bk_dist_name(d->kind));
    for (int j = 0; j < 6; j++)
      bad |= bk_buf_printf(&b, " %a", d->p[j]);
    bad |= bk_buf_putc(&b, '\n');
  }
  for (size_t i = 0; i < s->ncorr; i++)
    bad |= bk_buf_printf(&b, "corr %s %s %a\n", s->vars[s->corr[i].a].name,
                         s->vars[s->corr[i].b].name, s->corr[i].rho);
  const bk_analysis_t *an = &s->analysis;
  /* One limit state keeps the text it always had, so its runs resume. */
  for (size_t i = 0; i < s->nmodes; i++)
    bad |=
        bk_buf_printf(&b, "mode %s %s\n", s->modes[i].name, s->modes[i].text);
  bad |= bk_buf_printf(&b, "g %s\nmethod %s samples %llu replicates %u\n",
                       s->limit_state, bk_study_method_name(an->method),
                       (unsigned long long)an->samples, an->replicates);
  if (an->method >= BK_METHOD_FORM) {
    bad |= bk_buf_printf(&b, "form %a %d %d %a %d\n", an->form.step,
                         an->form.central, an->form.max_iterations,
                         an->form.tolerance, an->form.sorm);
    bad |= bk_buf_printf(&b, "explore %d %d %d defensive %a\n",
                         an->form.explore, an->form.searches, an->form.probe,
                         an->importance.defensive);
    bad |= bk_buf_printf(&b, "ce %d %a %d\nsubset %a %d\n",
                         an->cross_entropy.components, an->cross_entropy.rho,
                         an->cross_entropy.max_steps, an->subset.p0,
                         an->subset.max_levels);
    for (size_t i = 0; an->importance.has_center && i < s->nvars; i++)
      bad |= bk_buf_printf(&b, "center %a\n", an->importance.center[i]);
  }
  if (an->method == BK_METHOD_SURROGATE) {
    /* Every decision of the method depends on these (the batch size too:
     * it sets which points each iteration picks). */
    const bk_surrogate_opts_t *o = &an->surrogate;
    bk_buf_printf(&b, "surrogate %d %d %d %d %d %d %a\n", o->batch, o->start,
                  o->trend, o->noisy, o->eff, o->believer, o->train_share);
  }
  if (!b.data)
    return BK_ENOMEM;
  char hex[33];
  if (!bad) {
    bk_study_digest_hex(b.data, b.len, hex);
    s->digest_study = bk_strdup(hex);
  }
  bk_buf_reset(&b);
  const bk_model_t *m = &s->model;
  bad |= bk_buf_printf(&b, "model %d\n", m->present);
  for (size_t i = 0; i < m->argc; i++)
    bad |= bk_buf_printf(&b, "arg %s\n", m->argv[i]);
  for (size_t i = 0; i < m->nenv; i++)
    bad |= bk_buf_printf(&b, "env %s\n", m->env[i]);
  for (size_t i = 0; i < m->ndecks; i++)
    bad |= bk_buf_printf(&b, "deck %s %s\n", m->decks[i].template_name,
                         m->decks[i].to);
  for (size_t i = 0; i < m->ncopy; i++)
    bad |= bk_buf_printf(&b, "copy %s\n", m->copy_names[i]);
  for (size_t i = 0; i < m->noutputs; i++)
    bad |= bk_buf_printf(&b, "out %s %d %s %d %s\n", m->outputs[i].name,
                         m->outputs[i].from_stdout,
                         m->outputs[i].file ? m->outputs[i].file : "",
                         (int)m->outputs[i].match, m->outputs[i].pattern);
  bad |= bk_buf_printf(&b, "timeout %a\n", m->timeout);
  if (!bad) {
    bk_study_digest_hex(b.data, b.len, hex);
    s->digest_model = bk_strdup(hex);
  }
  bk_buf_close(&b);
  return s->digest_study && s->digest_model ? 0 : BK_ENOMEM;
}

/* ---- top level ------------------------------------------------------ */

static char *dirname_of(const char *path) {
  const char *slash = strrchr(path, '/');
  if (!slash)
    return bk_strdup(".");
  if (slash == path)
    return bk_strdup("/");
  return bk_strndup(path, (size_t)(slash - path));
}

static char *stem_of(const char *path) {
  const char *base = strrchr(path, '/') ? strrchr(path, '/') + 1 : path;
  const char *dot = strrchr(base, '.');
  return bk_strndup(base,
                    dot && dot != base ? (size_t)(dot - base) : strlen(base));
}

static int load_root(loader_t *L, yaml_node_t *root) {
  bk_study_t *s = L->s;
  int rc;
  if (root->type != YAML_MAPPING_NODE)
    return FAIL(L, root,
                "a study file is a mapping with at least "
                "'variables' and 'limit_state'; got %s",
                kind_word(root));
  if ((rc = check_keys(L, root, "the study file", keys_root)))
    return rc;
  yaml_node_t *n;
  if ((n = lookup(L, root, "name"))) {
    const char *t;
    if ((rc = want_text(L, n, "name", &t)))
      return rc;
    for (const char *p = t; *p; p++)
      if (!(isalnum((unsigned char)*p) || *p == '-' || *p == '_' || *p == '.'))
        return FAIL(L, n,
                    "name '%s' may contain only letters, digits, '-', "
                    "'_' and '.' (it names the run folder)",
                    t);
    s->name = bk_strdup(t);
  } else {
    s->name = stem_of(L->path);
  }
  if (!s->name)
    return nomem(L);
  s->seed = 1;
  if ((n = lookup(L, root, "seed"))) {
    const char *t;
    if ((rc = want_text(L, n, "seed", &t)))
      return rc;
    char *end;
    errno = 0;
    unsigned long long v = strtoull(t, &end, 10);
    if (!isdigit((unsigned char)t[0]) || *end || errno)
      return FAIL(L, n,
                  "seed must be a whole number from 0 to "
                  "18446744073709551615, got '%s'",
                  t);
    s->seed = v;
  }
  yaml_node_t *vn = lookup(L, root, "variables");
  if (!vn)
    return FAIL(L, root,
                "the study file needs 'variables' (the basic "
                "random variables)");
  if ((rc = load_variables(L, vn)))
    return rc;
  yaml_node_t *cn = lookup(L, root, "correlations");
  if (cn && (rc = load_correlations(L, cn)))
    return rc;
  if ((rc = build_transform(L, cn)))
    return rc;
  if ((n = lookup(L, root, "model")) && (rc = load_model(L, n)))
    return rc;
  yaml_node_t *gn = lookup(L, root, "limit_state");
  yaml_node_t *ln = lookup(L, root, "limit_states");
  yaml_node_t *sn = lookup(L, root, "system");
  if (gn && ln)
    return FAIL(L, ln,
                "give either 'limit_state' (one) or 'limit_states' "
                "(several, by name), not both");
  if (sn && !ln)
    return FAIL(L, sn,
                "'system' combines the entries of 'limit_states'; with one "
                "'limit_state' leave it out");
  if (!gn && !ln)
    return FAIL(L, root,
                "the study file needs 'limit_state', an expression "
                "that is <= 0 on failure, e.g. \"r - s\" (or "
                "'limit_states', several by name)");
  if ((rc = gn ? load_limit_state(L, gn) : load_limit_states(L, ln, sn)))
    return rc;
  if ((rc = load_analysis(L, lookup(L, root, "analysis"))))
    return rc;
  if (sn && s->system == BK_SYSTEM_EXPR && s->analysis.method == BK_METHOD_FORM)
    return FAIL(L, sn,
                "FORM gives first-order bounds for a series or a parallel "
                "system only; for a system written as an expression use a "
                "sampling method (random, lhs, sobol) or importance, "
                "cross-entropy, subset");
  if ((rc = check_design(L, root)))
    return rc;
  if ((rc = load_run(L, lookup(L, root, "run"))))
    return rc;
  /* The surrogate method's batch follows run.slots unless given. */
  if (s->analysis.method == BK_METHOD_SURROGATE && !s->analysis.surrogate.batch)
    s->analysis.surrogate.batch = s->run.slots;
  if (make_digests(s))
    return nomem(L);
  return 0;
}

int bk_study_load(const char *path, bk_study_t **out, bk_error_t *err) {
  *out = NULL;
  loader_t L;
  memset(&L, 0, sizeof L);
  L.path = path;
  L.err = err;
  char *text = NULL;
  size_t len = 0;
  int rc = read_file(path, &text, &len);
  if (rc)
    return bk_error_set(err, rc == BK_ENOMEM ? BK_ENOMEM : BK_ESTUDY, path, 0,
                        0, "cannot read the study file: %s", bk_strerror(rc));
  L.text = text;
  L.len = len;
  bk_study_t *s = bk_calloc(1, sizeof *s);
  if (!s) {
    bk_free(text);
    return bk_error_set(err, BK_ENOMEM, path, 0, 0, "out of memory");
  }
  L.s = s;
  s->path = bk_strdup(path);
  s->dir = dirname_of(path);
  if (!s->path || !s->dir) {
    rc = bk_error_set(err, BK_ENOMEM, path, 0, 0, "out of memory");
    goto out;
  }
  yaml_parser_t parser;
  yaml_parser_initialize(&parser);
  yaml_parser_set_input_string(&parser, (const unsigned char *)text, len);
  if (!yaml_parser_load(&parser, &L.doc)) {
    rc = fail_at(&L, &parser.problem_mark, "malformed YAML: %s%s%s",
                 parser.problem ? parser.problem : "syntax error",
                 parser.context ? " " : "",
                 parser.context ? parser.context : "");
    yaml_parser_delete(&parser);
    goto out;
  }
  yaml_node_t *root = yaml_document_get_root_node(&L.doc);
  if (!root) {
    rc = bk_error_set(err, BK_ESTUDY, path, 1, 1,
                      "the study file is empty; start from `brink init`");
  } else {
    rc = load_root(&L, root);
  }
  yaml_document_delete(&L.doc);
  yaml_parser_delete(&parser);
out:
  bk_free(text);
  if (rc) {
    bk_study_free(s);
    return rc;
  }
  *out = s;
  return 0;
}

void bk_study_free(bk_study_t *s) {
  if (!s)
    return;
  for (size_t i = 0; i < s->nvars; i++)
    bk_free(s->vars[i].name);
  bk_free(s->vars);
  bk_free(s->var_names);
  bk_free(s->corr);
  bk_transform_free(s->transform);
  bk_model_t *m = &s->model;
  for (size_t i = 0; i < m->ndecks; i++) {
    bk_free(m->decks[i].template_path);
    bk_free(m->decks[i].template_name);
    bk_free(m->decks[i].to);
    bk_free(m->decks[i].digest);
    bk_template_free(m->decks[i].tpl);
  }
  bk_free(m->decks);
  for (size_t i = 0; i < m->ncopy; i++) {
    if (m->copy)
      bk_free(m->copy[i]);
    bk_free(m->copy_names[i]);
  }
  bk_free(m->copy);
  bk_free(m->copy_names);
  for (size_t i = 0; i < m->nwatch; i++) {
    if (m->watch)
      bk_free(m->watch[i]);
    bk_free(m->watch_names[i]);
  }
  bk_free(m->watch);
  bk_free(m->watch_names);
  for (size_t i = 0; m->version_argv && m->version_argv[i]; i++)
    bk_free(m->version_argv[i]);
  bk_free(m->version_argv);
  for (size_t i = 0; m->argv && m->argv[i]; i++) {
    bk_free(m->argv[i]);
    if (m->argt)
      bk_template_free(m->argt[i]);
  }
  bk_free(m->argv);
  bk_free(m->argt);
  for (size_t i = 0; i < m->nenv; i++)
    bk_free(m->env[i]);
  bk_free(m->env);
  for (size_t i = 0; m->inherit && i < m->ninherit; i++)
    bk_free(m->inherit[i]);
  bk_free(m->inherit);
  for (size_t i = 0; i < m->noutputs; i++) {
    bk_free(m->outputs[i].name);
    bk_free(m->outputs[i].file);
    bk_free(m->outputs[i].pattern);
    bk_extract_pattern_free(m->outputs[i].re);
  }
  bk_free(m->outputs);
  bk_free(s->analysis.importance.center);
  bk_free(s->limit_state);
  bk_expr_free(s->g);
  for (size_t i = 0; i < s->nmodes; i++) {
    bk_free(s->modes[i].name);
    bk_free(s->modes[i].text);
    bk_expr_free(s->modes[i].g);
  }
  bk_free(s->modes);
  bk_expr_free(s->system_g);
  bk_free(s->run.folder);
  bk_free(s->run.scratch);
  bk_free(s->name);
  bk_free(s->path);
  bk_free(s->dir);
  bk_free(s->digest_study);
  bk_free(s->digest_model);
  bk_free(s);
}
