/*
 * Fuzz target: the study loader. The input is written as a study file in
 * a private folder (next to a template and a copied file that seeds may
 * name) and loaded; a failure must name the file and say why.
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "base/error.h"
#include "study/study.h"

#ifndef BK_FUZZ_ENTRY
#define BK_FUZZ_ENTRY LLVMFuzzerTestOneInput
#endif

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size);

static char fs_dir[64];
static char fs_path[96];

static void fs_put(const char *name, const char *text) {
  char p[128];
  snprintf(p, sizeof p, "%s/%s", fs_dir, name);
  FILE *f = fopen(p, "w");
  assert(f);
  fputs(text, f);
  fclose(f);
}

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size) {
  if (!fs_dir[0]) {
    snprintf(fs_dir, sizeof fs_dir, "/tmp/bk-fuzz-study-%ld", (long)getpid());
    mkdir(fs_dir, 0700);
    snprintf(fs_path, sizeof fs_path, "%s/study.yaml", fs_dir);
    fs_put("deck.inp",
           "x = {{ _index : %.17g }}\n# {{ _key }} {{ _folder }}\n");
    fs_put("wall.in", "phi = {{ phi }}\n");
    fs_put("mesh.inp", "*NODE\n");
  }
  FILE *f = fopen(fs_path, "wb");
  assert(f);
  if (size)
    assert(fwrite(data, 1, size, f) == size);
  fclose(f);
  bk_study_t *s = NULL;
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_study_load(fs_path, &s, &err);
  if (rc == 0) {
    assert(s && s->nvars > 0 && (s->g || s->nmodes));
    assert(!s->nmodes || s->nsystem == s->nmodes);
    bk_study_free(s);
  } else {
    assert(!s);
    assert(err.code == rc && err.msg[0]);
  }
  return 0;
}
