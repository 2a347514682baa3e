/*
 * Replay of recorded evaluations (see replay.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/replay.h"

#include <inttypes.h>
#include <stdio.h>
#include <string.h>

int bk_replay_key(char *out, size_t cap, const char *prefix, uint64_t index) {
  int n = snprintf(out, cap, "%s/%" PRIu64, prefix, index);
  return n >= 0 && (size_t)n < cap ? 0 : BK_ERANGE;
}

int bk_replay_same_inputs(const double *a, const double *b, size_t n) {
  return n == 0 || memcmp(a, b, n * sizeof *a) == 0;
}

int bk_replay_point(bk_records_t *const *logs, size_t nlogs, const char *key,
                    size_t nx, size_t ny, bk_point_t *pt, bk_record_t *rec,
                    bk_error_t *err) {
  bk_record_t found;
  size_t l = 0;
  while (l < nlogs && !(logs[l] && bk_records_find(logs[l], key, &found)))
    l++;
  if (l == nlogs)
    return 0;
  if (found.nx != nx || found.ny != ny ||
      !bk_replay_same_inputs(found.x, pt->x, nx))
    return bk_error_set(err, BK_EMISMATCH, NULL, 0, 0,
                        "the recorded inputs of %s differ from the ones "
                        "this study gives, so the records were made "
                        "differently (another brink version?) and cannot "
                        "be reused. Use a new run.folder",
                        key);
  if (ny)
    memcpy(pt->y, found.y, ny * sizeof *pt->y);
  pt->g = found.g;
  pt->fault = found.fault;
  if (rec)
    *rec = found;
  return 1;
}
