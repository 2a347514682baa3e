/*
 * Fingerprints of what the model reads: file contents, hashed as a stream
 * (a model file of hundreds of MB is never read whole), and the output of
 * a version command. The digests equal bk_study_digest_hex of the same bytes,
 * 32 hex digits; they go into the records header as fingerprint parts
 * (shard.h, bk_shard_ident_init), so that a resume after a change is
 * refused naming what changed.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_FINGERPRINT_H
#define BK_FINGERPRINT_H

#include <stddef.h>
#include <stdint.h>

#include "base/error.h"

/* A digest in progress. */
typedef struct {
  uint64_t a, b;
  uint64_t len;
} bk_fingerprint_t;

/* Starts a digest of `len` bytes in all (the length seeds one lane, as in
 * bk_study_digest_hex, so it must be known first). */
void bk_fingerprint_init(bk_fingerprint_t *f, uint64_t len);
void bk_fingerprint_update(bk_fingerprint_t *f, const void *data, size_t n);
/* The digest as 32 hex digits into hex[33]. */
void bk_fingerprint_final(bk_fingerprint_t *f, char hex[33]);

/* The digest of a file's contents (read in blocks). `what` names the file
 * in messages ("model.copy solver.inp"). Returns 0, or a negative errno
 * with err set. */
int bk_fingerprint_file(const char *path, const char *what, char hex[33],
                        bk_error_t *err);

/* Runs argv (argv[0] looked up on PATH) in folder `dir`, standard input
 * from /dev/null, standard error passed through, and digests its argv and
 * standard output. The command must exit 0 within `limit` seconds.
 * Returns 0, or BK_EMODEL with err naming the command and what went
 * wrong. */
int bk_fingerprint_command(char *const argv[], const char *dir, double limit,
                           char hex[33], bk_error_t *err);

#endif
