/*
 * Shards: `brink run --shard i/n` for job arrays without MPI. Shard i of n
 * (0 <= i < n) owns the keys whose index (the number after the key's last
 * '/') is i modulo n, evaluates only those and writes its own log,
 * RUN.FOLDER/records-shard-i-of-n.log. Only the sampling methods (random,
 * lhs, sobol) can be sharded, and a shard evaluates every planned sample of
 * its keys (target_cov is applied later, by `brink merge`, at the same
 * decision points a single run would use). Adaptive methods choose each
 * batch from earlier responses, so their keys are not known in advance;
 * they are refused.
 *
 * Also here: the records identity of a study (fingerprint parts, column
 * names) shared by run, merge and the MPI workers, and an evaluator that
 * serves every key from record logs alone (for merge).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_SHARD_H
#define BK_SHARD_H

#include <stddef.h>
#include <stdint.h>

#include "base/error.h"
#include "eval/evaluator.h"
#include "eval/records.h"
#include "study/study.h"

typedef struct {
  uint32_t index; /* i */
  uint32_t count; /* n; 0 = not sharded */
} bk_shard_t;

/* Parses "i/n" (decimal, 0 <= i < n <= 1000000). Returns 0 or BK_EINVAL
 * with a message in why. */
int bk_shard_parse(const char *text, bk_shard_t *sh, char *why, size_t cap);
/* 1 when the shard owns the evaluation of this index. */
int bk_shard_owns(const bk_shard_t *sh, uint64_t index);
/* "records-shard-i-of-n.log". */
void bk_shard_log_name(const bk_shard_t *sh, char *out, size_t cap);
/* 1 and *sh when `name` is a shard log name, else 0. */
int bk_shard_parse_log_name(const char *name, bk_shard_t *sh);
/* 1 when the method may be sharded. */
int bk_shard_method_allowed(bk_method_kind_t m);

/* The evaluator of a shard: passes the owned points of each batch to
 * `inner`; the others get g = +1 (safe) and no fault, which the shard's own
 * (meaningless) estimate ignores. */
typedef struct {
  bk_shard_t sh;
  bk_evaluator_t *inner;
  uint64_t owned; /* owned points evaluated so far */
} bk_shard_eval_t;

void bk_shard_evaluator(bk_shard_eval_t *se, bk_evaluator_t *ev);

/* ---- records identity -------------------------------------------------- */

typedef struct {
  bk_fingerprint_part_t *parts;
  size_t nparts;
  char **names;        /* owned part names */
  char **digests;      /* owned digests (NULL for those of the study) */
  const char **ynames; /* output names */
} bk_shard_ident_t;

/* The fingerprint parts of study s: the study and model sections, each
 * template, each model.copy and model.watch file (hashed now) and the
 * output of model.version_command (run now, in the study's folder).
 * Returns 0, or a negative code with err set naming the file or command. */
int bk_shard_ident_init(bk_shard_ident_t *id, const bk_study_t *s,
                        bk_error_t *err);
void bk_shard_ident_close(bk_shard_ident_t *id);
/* Fills ro for the log at `path` of this study. */
void bk_shard_ident_opts(const bk_shard_ident_t *id, const bk_study_t *s,
                         const char *path, bk_records_opts_t *ro);

/* ---- serving from records ---------------------------------------------- */

/* An evaluator that answers every key from `logs` (searched in order) and
 * never runs a model. A key found nowhere is counted in missing[] by the
 * shard that owns it (missing has `count` entries, count = the shards'
 * n) and answered as safe, so that one pass finds every gap; `first` keeps
 * the first missing key of each shard. */
typedef struct {
  const bk_study_t *study;
  bk_records_t **logs;
  size_t nlogs;
  uint32_t count;
  uint64_t *missing;
  char (*first)[96];
  uint64_t served;
  /* A re-analysis: g of each served point is computed again from its
   * recorded inputs and outputs with the study's (changed) limit states,
   * instead of the recorded g. */
  int recompute;
} bk_serve_t;

void bk_shard_serve_evaluator(bk_serve_t *sv, bk_evaluator_t *ev);

#endif
