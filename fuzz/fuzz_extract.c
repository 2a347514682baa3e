/*
 * Fuzz target: the number extractor. The first line of the input is a
 * PCRE2 pattern, the rest the model's output. The output is searched in
 * memory and, from a file, in small chunks, with each selection: both
 * scans must agree (the chunked scan promises the matches of a search
 * over the whole text). Every matched text also goes through the number
 * reader.
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <fcntl.h>
#include <math.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "study/extract.h"
#include "base/fault.h"

#ifndef BK_FUZZ_ENTRY
#define BK_FUZZ_ENTRY LLVMFuzzerTestOneInput
#endif

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size);

static char fx_path[64];

static int fx_each(const char *s, size_t len, size_t offset, void *d) {
  (void)offset;
  (void)d;
  double v;
  if (bk_extract_number(s, len, &v) == 0)
    assert(isfinite(v));
  return 0;
}

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size) {
  const char *nl = memchr(data, '\n', size);
  if (!nl || size > 65536)
    return 0;
  size_t plen = (size_t)(nl - (const char *)data);
  char *re = malloc(plen + 1);
  memcpy(re, data, plen);
  re[plen] = '\0';
  const char *text = nl + 1;
  size_t tlen = size - plen - 1;
  bk_pattern_t *p = NULL;
  char msg[256];
  size_t off;
  int rc = bk_extract_pattern_compile(re, &p, msg, sizeof msg, &off);
  free(re);
  double v;
  (void)bk_extract_number(text, tlen, &v);
  if (rc) {
    assert(!p);
    return 0;
  }
  if (!fx_path[0]) {
    snprintf(fx_path, sizeof fx_path, "/tmp/bk-fuzz-extract-%ld.txt",
             (long)getpid());
  }
  int fd = open(fx_path, O_WRONLY | O_CREAT | O_TRUNC, 0600);
  assert(fd >= 0);
  assert(write(fd, text, tlen) == (ssize_t)tlen);
  close(fd);
  (void)bk_extract_text_each(p, text, tlen, fx_each, NULL, NULL, 0);
  bk__extract_set_chunk(7);
  for (int sel = BK_MATCH_FIRST; sel <= BK_MATCH_MIN; sel++) {
    double a = NAN, b = NAN;
    char wa[256], wb[256];
    int ra = bk_extract_text(p, text, tlen, (bk_match_t)sel, &a, wa, sizeof wa);
    int rb = bk_extract_file(p, fx_path, (bk_match_t)sel, &b, wb, sizeof wb);
    /* A pattern that gives up (PCRE2's limits, the window) may give up at
     * another place in a chunked scan; otherwise both agree exactly. */
    if (!strstr(wa, "gave up") && !strstr(wb, "gave up")) {
      assert(ra == rb);
      if (ra == BK_FAULT_NONE)
        assert(a == b || (isnan(a) && isnan(b)));
    }
  }
  bk__extract_set_chunk(0);
  bk_extract_pattern_free(p);
  return 0;
}
