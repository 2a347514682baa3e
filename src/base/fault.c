/*
 * Names of the fault kinds (see fault.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "base/fault.h"

#include <string.h>

static const char *const names[BK_FAULT__COUNT] = {
    "ok",      "spawn-failed", "exit-code",   "signal",
    "timeout", "no-output-file", "no-match", "not-a-number",
};

const char *bk_fault_name(int fault) {
  if (fault >= 0 && fault < BK_FAULT__COUNT)
    return names[fault];
  if (fault == BK_FAULT_INTERRUPTED)
    return "interrupted";
  return "unknown";
}

int bk_fault_from_name(const char *name) {
  for (int i = 0; i < BK_FAULT__COUNT; i++)
    if (strcmp(name, names[i]) == 0)
      return i;
  return -1;
}
