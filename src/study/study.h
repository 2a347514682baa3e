/*
 * The study: a study file (YAML) loaded into a validated, immutable
 * structure. Everything a run needs is checked at load time -- parameters,
 * correlations (after the Nataf adjustment), names in the limit state and in
 * templates, patterns -- so that a run never fails on a typo. Errors name
 * file:line:col.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_STUDY_H
#define BK_STUDY_H

#include <stddef.h>
#include <stdint.h>

#include "numerics/dist.h"
#include "base/error.h"
#include "study/expr.h"
#include "study/extract.h"
#include "study/template.h"
#include "numerics/transform.h"

typedef struct {
  char *name;
  bk_dist_t dist;
  int line; /* location of the variable in the study file */
} bk_var_t;

typedef struct {
  char *name;
  int from_stdout; /* read the process's standard output */
  char *file;      /* else this file, relative to the run folder */
  char *pattern;
  bk_match_t match;
  bk_pattern_t *re;
} bk_output_t;

typedef struct {
  char *template_path; /* absolute or relative to the working directory */
  char *template_name; /* as written in the study file */
  char *to;            /* file name inside the run folder */
  bk_template_t *tpl;
  char *digest; /* of the template text, for the fingerprint */
} bk_deck_t;

typedef enum {
  BK_ON_ERROR_SKIP,
  BK_ON_ERROR_FAIL,
  BK_ON_ERROR_ABORT
} bk_on_error_t;
typedef enum {
  BK_KEEP_ALL,
  BK_KEEP_FAILED,
  BK_KEEP_ERRORS,
  BK_KEEP_NONE
} bk_keep_t;

typedef struct {
  int present; /* the study has a model: section */
  bk_deck_t *decks;
  size_t ndecks;
  char **copy;       /* paths (resolved) of static files */
  char **copy_names; /* as written */
  size_t ncopy;
  char **watch;       /* paths (resolved) of files the model reads */
  char **watch_names; /* as written */
  size_t nwatch;
  char **version_argv; /* NULL-terminated; NULL when not given */
  size_t version_argc;
  char **argv; /* NULL-terminated, as written */
  size_t argc;
  /* argc entries: argument i parsed as a template when it holds `{{` or
   * `}}` (docs/templates.md), NULL when it is used as written; NULL when
   * no argument has one. argv[0], the program, never has one. */
  bk_template_t **argt;
  char **env; /* "NAME=VALUE", NULL-terminated */
  size_t nenv;
  char **inherit; /* model.inherit: names, or prefixes ending in '*', of
                     variables kept although brink removes them from the
                     model's environment (dispatch.c); NULL-terminated */
  size_t ninherit;
  double timeout; /* 0 = none */
  int retries;
  bk_on_error_t on_error;
  double max_error_fraction;
  bk_output_t *outputs;
  size_t noutputs;
  bk_keep_t keep;
} bk_model_t;

typedef enum {
  BK_METHOD_RANDOM,
  BK_METHOD_LHS,
  BK_METHOD_SOBOL,
  BK_METHOD_FORM,
  BK_METHOD_IMPORTANCE,
  BK_METHOD_CROSS_ENTROPY,
  BK_METHOD_SUBSET,
  BK_METHOD_SURROGATE,
  BK_METHOD__COUNT
} bk_method_kind_t;

/* analysis.form: the design-point search (form, and importance when no
 * center is given). */
typedef struct {
  double step;        /* finite-difference step in u-space; 1e-3 */
  int central;        /* differences: central (1) or forward (0) */
  int max_iterations; /* 100 */
  double tolerance;   /* convergence tolerance on u and g; 1e-3 */
  int sorm;           /* also Breitung SORM from a curvature batch; 0 */
  /* Design-point exploration (method_form.c, docs/methods.md). */
  int explore;  /* look for further design points; 1 */
  int searches; /* most searches, the first included; 0: by dimension */
  int probe;    /* points of the probe around the beta sphere; -1: by
                   dimension */
} bk_form_opts_t;

/* analysis.importance: sampling around a design point. */
typedef struct {
  int has_center;   /* center given by the user (x-space) */
  double *center;   /* nvars values (constants keep their value) */
  double defensive; /* share of the original density in the mixture; 0.1 */
} bk_importance_opts_t;

/* analysis.cross_entropy: adaptive Gaussian-mixture importance sampling. */
typedef struct {
  int components; /* mixture components; 1 */
  double rho;     /* quantile of the elite set; 0.1 */
  int max_steps;  /* adaptation steps; 30 */
} bk_ce_opts_t;

/* analysis.subset: subset simulation. */
typedef struct {
  double p0;      /* conditional probability per level; 0.1 */
  int max_levels; /* 20 */
} bk_subset_opts_t;

/* analysis.surrogate: Gaussian-process surrogate with active learning and
 * a correction by model runs (method_surrogate.c). */
typedef struct {
  int batch;          /* model runs per learning iteration and per
                         correction batch; run.slots when not given */
  int start;          /* points of the starting design; 0: automatic */
  int trend;          /* 0 constant, 1 linear, 2 auto (default) */
  int noisy;          /* estimate a nugget (noisy model); 0 */
  int eff;            /* learning function: 0 U (default), 1 EFF */
  int believer;       /* batch rule: 0 weighted k-means (default), 1
                         Kriging believer */
  double train_share; /* the most of max_evaluations spent learning; 0.6 */
} bk_surrogate_opts_t;

typedef struct {
  bk_method_kind_t method;
  uint64_t samples;    /* 0 when not given; importance and cross-entropy:
                          evaluations per batch; subset: per level */
  uint32_t replicates; /* lhs, sobol */
  double target_cov;   /* 0 when not given */
  uint64_t max_evaluations;
  int has_target_beta;
  double target_beta;
  double ci_level;
  bk_form_opts_t form;
  bk_importance_opts_t importance;
  bk_ce_opts_t cross_entropy;
  bk_subset_opts_t subset;
  bk_surrogate_opts_t surrogate;
} bk_analysis_t;

/* How each model run is started (run.launch). */
typedef enum {
  BK_LAUNCH_DIRECT, /* model.command as it is, in the run folder */
  BK_LAUNCH_SRUN    /* as a Slurm job step of ranks x threads CPUs inside
                       brink's allocation: srun --exact ... model.command */
} bk_launch_t;

typedef struct {
  char *folder; /* resolved */
  int slots;    /* model runs at a time */
  int slots_given;
  int threads; /* run.threads: threads (cores) per rank; 1 */
  int ranks;   /* run.ranks: MPI ranks per run; 1 */
  int cores;   /* threads * ranks: cores one run uses */
  bk_launch_t launch;
  char *scratch; /* "" when not given */
} bk_run_t;

/* Several limit states (limit_states:) and how they combine. */
typedef enum {
  BK_SYSTEM_SINGLE,   /* one limit_state */
  BK_SYSTEM_SERIES,   /* fails when any mode fails: g = min of the modes */
  BK_SYSTEM_PARALLEL, /* fails when every mode fails: g = max */
  BK_SYSTEM_EXPR      /* an expression over the mode names */
} bk_system_t;

/* The most limit states one study may hold. */
#define BK_STUDY_MAX_MODES 32

/* One limit state of several (a failure mode). */
typedef struct {
  char *name;   /* the user's name */
  char *text;   /* the expression as written */
  bk_expr_t *g; /* over names: variables, then model outputs */
} bk_mode_t;

typedef struct {
  char *path; /* the study file as given */
  char *dir;  /* its folder */
  char *name;
  uint64_t seed;
  bk_var_t *vars;
  size_t nvars;
  char **var_names; /* nvars entries, for name tables */
  bk_corr_t *corr;
  size_t ncorr;
  bk_transform_t *transform;
  bk_model_t model;
  char *limit_state; /* one limit_state; with several, the system as
                        written ("series", "parallel" or its expression) */
  bk_expr_t *g;      /* one limit state, over names: variables, then model
                        outputs; NULL with several (see bk_study_g) */
  bk_mode_t *modes;  /* limit_states, in the order written; nmodes = 0 for
                        one limit_state */
  size_t nmodes;
  size_t nsystem; /* the modes the system combines: the first nsystem (a
                     re-analysis may add modes beside the system) */
  bk_system_t system;
  bk_expr_t *system_g; /* BK_SYSTEM_EXPR: over the mode names */
  bk_analysis_t analysis;
  bk_run_t run;
  char *digest_study; /* fingerprint parts */
  char *digest_model;
} bk_study_t;

/* Loads and validates a study file. On failure returns BK_ESTUDY (or
 * BK_EIO, BK_ENOMEM) with err naming file:line:col, and *out is NULL. */
int bk_study_load(const char *path, bk_study_t **out, bk_error_t *err);
void bk_study_free(bk_study_t *s);

/* The command line of one evaluation: model.command with the placeholders
 * of its arguments rendered for ctx, as decks are (docs/templates.md).
 * Returns a NULL-terminated array in one allocation (free it with
 * bk_free), or NULL when out of memory. */
char **bk_study_render_argv(const bk_study_t *s, const bk_template_ctx_t *ctx);

const char *bk_study_method_name(bk_method_kind_t m);
const char *bk_study_launch_name(bk_launch_t l);

/* The cores brink may use on this machine: the CPUs of its affinity mask
 * (which a launcher or a Slurm step restricts), at least 1. */
int bk_study_machine_cores(void);
/* The CPUs of the Slurm allocation brink runs in, from
 * SLURM_JOB_CPUS_PER_NODE ("4(x2),2" is 10); 0 outside one. */
int bk_study_allocation_cores(void);
/* The hosts of a host list ($PBS_NODEFILE: a line per MPI process), 0
 * when it cannot be read. */
int bk_study_hostfile_lines(const char *path);
/* The cores the default run.slots divides: the allocation's for
 * run.launch srun inside one; under run.launch direct in a PBS job, the
 * lines of $PBS_NODEFILE x run.threads; else the machine's. */
int bk_study_available_cores(const bk_study_t *s);
/* Sets run.slots, when the study does not give it, to `cores` divided by
 * the cores per run (at least 1). */
void bk_study_default_slots(bk_study_t *s, int cores);

/* Calls cb once for every key a study file may hold, as a dotted path from
 * the top ("analysis.form.step"); "NAME" stands for a name the user
 * chooses ("model.outputs.NAME.file", "variables.NAME.mean") and "[]" for
 * an entry of a list ("model.files[].to"). The text lives until cb
 * returns. */
typedef void (*bk_study_key_cb)(const char *key, void *data);
void bk_study_keys(bk_study_key_cb cb, void *data);
/* Names bound by the limit state: variables then outputs; caller frees the
 * array (not the strings) with bk_free. */
const char **bk_study_g_names(const bk_study_t *s, size_t *n);

/* The limit-state value of the study at vals (nvars inputs, then
 * noutputs outputs): the one limit state, or with several the system's g,
 * and then each mode's value into gc[0..nmodes) when gc is not NULL. Every
 * evaluator computes g through this one function. NaN propagates: a mode
 * that is not a number makes a series or parallel system not a number. */
double bk_study_g(const bk_study_t *s, const double *vals, double *gc);

/* The system's g from the modes' values gc[0..nmodes). */
double bk_study_system(const bk_study_t *s, const double *gc);

/* For a re-analysis of recorded evaluations (`brink report
 * --limit-state`): gives limit state `name` the expression `expr` (over
 * the variables and the model's outputs). A name of limit_states changes
 * that mode, and so the system; "limit_state" in a study of one limit
 * state changes it; any other name adds a mode reported beside the
 * system, not part of it. The fingerprint is left as it was. Returns 0,
 * or BK_EPARSE, BK_ENOTFOUND, BK_EINVAL (a bad name, too many modes) or
 * BK_ENOMEM with a message in msg. */
int bk_study_set_limit_state(bk_study_t *s, const char *name, const char *expr,
                             char *msg, size_t cap);

/* A 128-bit digest of a text as 32 hex digits into hex[33]. */
void bk_study_digest_hex(const void *data, size_t len, char hex[33]);

#endif
