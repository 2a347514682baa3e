/*
 * Shards of a sampling study, the records identity of a study, and the
 * evaluator that serves keys from record logs (see shard.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/shard.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/fault.h"
#include "eval/fingerprint.h"
#include "eval/replay.h"

#define MAX_SHARDS 1000000u

static int parse_u32(const char *s, const char *end, uint32_t *v) {
  if (s == end || end - s > 7)
    return -1;
  uint32_t r = 0;
  for (const char *p = s; p < end; p++) {
    if (*p < '0' || *p > '9')
      return -1;
    r = r * 10 + (uint32_t)(*p - '0');
  }
  *v = r;
  return 0;
}

int bk_shard_parse(const char *text, bk_shard_t *sh, char *why, size_t cap) {
  const char *slash = text ? strchr(text, '/') : NULL;
  uint32_t i, n;
  if (!slash || parse_u32(text, slash, &i) ||
      parse_u32(slash + 1, slash + strlen(slash), &n)) {
    snprintf(why, cap,
             "--shard takes I/N, shard I of N counted from 0, e.g. "
             "--shard 0/4 (got '%s')",
             text ? text : "");
    return BK_EINVAL;
  }
  if (n == 0 || n > MAX_SHARDS || i >= n) {
    snprintf(why, cap,
             "--shard %s: need 0 <= I < N <= %u (shards are counted from "
             "0, as Slurm array task ids)",
             text, MAX_SHARDS);
    return BK_EINVAL;
  }
  sh->index = i;
  sh->count = n;
  return 0;
}

int bk_shard_owns(const bk_shard_t *sh, uint64_t index) {
  return sh->count == 0 || index % sh->count == sh->index;
}

void bk_shard_log_name(const bk_shard_t *sh, char *out, size_t cap) {
  snprintf(out, cap, "records-shard-%u-of-%u.log", sh->index, sh->count);
}

int bk_shard_parse_log_name(const char *name, bk_shard_t *sh) {
  unsigned i, n;
  int used = 0;
  if (sscanf(name, "records-shard-%u-of-%u.log%n", &i, &n, &used) != 2 ||
      name[used] != '\0' || n == 0 || i >= n || n > MAX_SHARDS)
    return 0;
  /* Only the canonical spelling (no leading zeros or signs). */
  char canon[64];
  snprintf(canon, sizeof canon, "records-shard-%u-of-%u.log", i, n);
  if (strcmp(canon, name) != 0)
    return 0;
  sh->index = i;
  sh->count = n;
  return 1;
}

int bk_shard_method_allowed(bk_method_kind_t m) {
  return m == BK_METHOD_RANDOM || m == BK_METHOD_LHS || m == BK_METHOD_SOBOL;
}

static int shard_batch(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
                       size_t n, bk_error_t *err) {
  bk_shard_eval_t *se = ev->data;
  size_t nown = 0;
  for (size_t i = 0; i < n; i++)
    nown += (size_t)bk_shard_owns(&se->sh, pts[i].index);
  bk_point_t *sub = bk_calloc(nown + 1, sizeof *sub);
  if (!sub)
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  size_t k = 0;
  for (size_t i = 0; i < n; i++)
    if (bk_shard_owns(&se->sh, pts[i].index))
      sub[k++] = pts[i];
  int rc = nown ? se->inner->batch(se->inner, prefix, sub, nown, err) : 0;
  k = 0;
  for (size_t i = 0; i < n; i++) {
    if (bk_shard_owns(&se->sh, pts[i].index)) {
      pts[i].g = sub[k].g;
      pts[i].fault = sub[k].fault;
      k++;
    } else {
      pts[i].g = 1.0;
      pts[i].fault = BK_FAULT_NONE;
    }
  }
  if (rc == 0)
    se->owned += nown;
  bk_free(sub);
  return rc;
}

void bk_shard_evaluator(bk_shard_eval_t *se, bk_evaluator_t *ev) {
  ev->batch = shard_batch;
  ev->data = se;
}

/* ---- records identity -------------------------------------------------- */

/* Seconds a version command may take. */
#define VERSION_COMMAND_LIMIT 120

/* Adds part `i` named by the printf text, with digest `digest` copied. */
static int ident_part(bk_shard_ident_t *id, size_t i, const char *digest,
                      const char *fmt, const char *arg) {
  bk_buf_t b;
  bk_buf_init(&b);
  bk_buf_printf(&b, fmt, arg);
  id->names[i] = b.data;
  id->digests[i] = bk_strdup(digest);
  if (!id->names[i] || !id->digests[i])
    return BK_ENOMEM;
  id->parts[i] = (bk_fingerprint_part_t){id->names[i], id->digests[i]};
  return 0;
}

int bk_shard_ident_init(bk_shard_ident_t *id, const bk_study_t *s,
                        bk_error_t *err) {
  const bk_model_t *m = &s->model;
  memset(id, 0, sizeof *id);
  id->nparts = 3 + m->ndecks + m->ncopy + m->nwatch + (m->version_argv ? 1 : 0);
  id->parts = bk_calloc(id->nparts, sizeof *id->parts);
  id->names = bk_calloc(id->nparts, sizeof *id->names);
  id->digests = bk_calloc(id->nparts, sizeof *id->digests);
  id->ynames = bk_calloc(m->noutputs + 1, sizeof *id->ynames);
  int rc = 0;
  if (!id->parts || !id->names || !id->digests || !id->ynames) {
    rc = BK_ENOMEM;
    goto fail;
  }
  id->parts[0] = (bk_fingerprint_part_t){"study", s->digest_study};
  id->parts[1] = (bk_fingerprint_part_t){"model", s->digest_model};
  id->parts[2] = (bk_fingerprint_part_t){"tool", "brink-" BK_VERSION};
  size_t k = 3;
  for (size_t i = 0; i < m->ndecks; i++)
    if ((rc = ident_part(id, k++, m->decks[i].digest, "template %s",
                         m->decks[i].template_name)))
      goto fail;
  char hex[33], what[600];
  for (size_t i = 0; i < m->ncopy; i++) {
    snprintf(what, sizeof what, "model.copy file %s", m->copy_names[i]);
    if ((rc = bk_fingerprint_file(m->copy[i], what, hex, err)) ||
        (rc = ident_part(id, k++, hex, "copy %s", m->copy_names[i])))
      goto fail;
  }
  for (size_t i = 0; i < m->nwatch; i++) {
    snprintf(what, sizeof what, "model.watch file %s", m->watch_names[i]);
    if ((rc = bk_fingerprint_file(m->watch[i], what, hex, err)) ||
        (rc = ident_part(id, k++, hex, "watch %s", m->watch_names[i])))
      goto fail;
  }
  if (m->version_argv &&
      ((rc = bk_fingerprint_command(m->version_argv, s->dir,
                                    VERSION_COMMAND_LIMIT, hex, err)) ||
       (rc = ident_part(id, k++, hex, "%s", "version_command output"))))
    goto fail;
  for (size_t i = 0; i < m->noutputs; i++)
    id->ynames[i] = m->outputs[i].name;
  return 0;
fail:
  if (rc == BK_ENOMEM)
    bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  bk_shard_ident_close(id);
  return rc;
}

void bk_shard_ident_close(bk_shard_ident_t *id) {
  for (size_t i = 0; id->names && i < id->nparts; i++)
    bk_free(id->names[i]);
  for (size_t i = 0; id->digests && i < id->nparts; i++)
    bk_free(id->digests[i]);
  bk_free(id->names);
  bk_free(id->digests);
  bk_free(id->parts);
  bk_free(id->ynames);
  memset(id, 0, sizeof *id);
}
void bk_shard_ident_opts(const bk_shard_ident_t *id, const bk_study_t *s,
                         const char *path, bk_records_opts_t *ro) {
  memset(ro, 0, sizeof *ro);
  ro->path = path;
  ro->tool = "brink " BK_VERSION;
  ro->nparts = id->nparts;
  ro->parts = id->parts;
  ro->nx = s->nvars;
  ro->xnames = (const char *const *)s->var_names;
  ro->ny = s->model.noutputs;
  ro->ynames = id->ynames;
}

/* ---- serving from records ---------------------------------------------- */

static int serve_batch(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
                       size_t n, bk_error_t *err) {
  bk_serve_t *sv = ev->data;
  const bk_study_t *s = sv->study;
  for (size_t i = 0; i < n; i++) {
    char key[BK_REPLAY_KEY_MAX];
    bk_replay_key(key, sizeof key, prefix, pts[i].index);
    int found = bk_replay_point(sv->logs, sv->nlogs, key, s->nvars,
                                s->model.noutputs, &pts[i], NULL, err);
    if (found < 0)
      return found;
    if (found) {
      sv->served++;
      if (sv->recompute) {
        bk_point_t *p = &pts[i];
        if (p->fault == BK_FAULT_NONE || p->fault == BK_FAULT_NOT_A_NUMBER) {
          double vals[512];
          double *v = s->nvars + s->model.noutputs <= 512
                          ? vals
                          : bk_calloc(s->nvars + s->model.noutputs, sizeof *v);
          if (!v)
            return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
          memcpy(v, p->x, s->nvars * sizeof *v);
          if (s->model.noutputs)
            memcpy(v + s->nvars, p->y, s->model.noutputs * sizeof *v);
          p->g = bk_study_g(s, v, p->gc);
          p->fault = isnan(p->g) ? BK_FAULT_NOT_A_NUMBER : BK_FAULT_NONE;
          if (v != vals)
            bk_free(v);
        }
      }
      continue;
    }
    uint32_t owner = sv->count ? (uint32_t)(pts[i].index % sv->count) : 0;
    if (sv->missing) {
      if (sv->missing[owner]++ == 0 && sv->first)
        snprintf(sv->first[owner], sizeof sv->first[owner], "%s", key);
    }
    for (size_t k = 0; k < s->model.noutputs; k++)
      pts[i].y[k] = NAN;
    pts[i].g = 1.0;
    pts[i].fault = BK_FAULT_NONE;
  }
  return 0;
}

void bk_shard_serve_evaluator(bk_serve_t *sv, bk_evaluator_t *ev) {
  ev->batch = serve_batch;
  ev->data = sv;
}
