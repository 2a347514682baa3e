/*
 * Replay: how a recorded evaluation answers again. Every evaluator that
 * reads records (the local dispatcher, the MPI coordinator, the records
 * server of `brink merge`) finds a point's key in its logs through this
 * one function, checks that the recorded inputs are bit for bit the ones
 * the method asks for, and copies the outputs, g and the fault into the
 * point. That check is what makes a resumed run end with exactly the
 * numbers of an uninterrupted one: a log made differently is refused
 * rather than mixed in.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_REPLAY_H
#define BK_REPLAY_H

#include <stddef.h>
#include <stdint.h>

#include "base/error.h"
#include "eval/evaluator.h"
#include "eval/records.h"

/* Room for any key brink makes: a method prefix and a 64-bit index. */
#define BK_REPLAY_KEY_MAX 96

/* Writes the key of a point, "PREFIX/INDEX", into out (cap bytes, at most
 * BK_REPLAY_KEY_MAX is needed). Returns 0, or BK_ERANGE when it does not
 * fit (out then holds a cut key). */
int bk_replay_key(char *out, size_t cap, const char *prefix, uint64_t index);

/* Looks `key` up in logs[0..nlogs), in that order. When it is recorded
 * with the inputs pt->x (nx values, compared bit for bit), copies the
 * record's ny outputs, g and fault into pt, and the record itself into
 * *rec when rec is not NULL (its strings and arrays live in the log's
 * storage until the next call on that log). Returns 1 when replayed, 0
 * when the key is recorded nowhere (pt unchanged), or BK_EMISMATCH with
 * err naming the key and what to do when the recorded inputs differ. */
int bk_replay_point(bk_records_t *const *logs, size_t nlogs, const char *key,
                    size_t nx, size_t ny, bk_point_t *pt, bk_record_t *rec,
                    bk_error_t *err);

/* 1 when the n doubles of a and b are the same bits (so -0 differs from 0
 * and a NaN equals the same NaN). */
int bk_replay_same_inputs(const double *a, const double *b, size_t n);

#endif
