/*
 * Tests of error codes and their exit codes (base/error.c).
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <errno.h>
#include <string.h>

#include "base/error.h"

/* The one table of exit codes (DESIGN.md section 3): 3 only where running
 * the same command again can succeed without a change. */
Test(error, exit_code_table) {
  static const struct {
    int code;
    bk_exit_t exit;
  } table[] = {
      {BK_OK, BK_EXIT_DONE},           {BK_ESTOPPED, BK_EXIT_STOPPED},
      {BK_ENOSPC, BK_EXIT_STOPPED},    {-ENOSPC, BK_EXIT_STOPPED},
      {-EDQUOT, BK_EXIT_STOPPED},      {BK_EPARSE, BK_EXIT_USAGE},
      {BK_ESTUDY, BK_EXIT_USAGE},      {BK_EMISMATCH, BK_EXIT_USAGE},
      {BK_ECORRUPT, BK_EXIT_USAGE},    {BK_ENOTFOUND, BK_EXIT_USAGE},
      {-EACCES, BK_EXIT_USAGE},        {-EROFS, BK_EXIT_USAGE},
      {-ENOTDIR, BK_EXIT_USAGE},       {BK_EMODEL, BK_EXIT_RUNTIME},
      {BK_EPROTO, BK_EXIT_RUNTIME},    {BK_EIO, BK_EXIT_RUNTIME},
      {BK_ENOMEM, BK_EXIT_RUNTIME},    {BK_ELOCKED, BK_EXIT_RUNTIME},
      {BK_ECANCELED, BK_EXIT_RUNTIME}, {BK_EINVAL, BK_EXIT_RUNTIME},
      {-EBADF, BK_EXIT_RUNTIME},
  };
  for (size_t i = 0; i < sizeof table / sizeof table[0]; i++)
    cr_expect_eq(bk_error_exit(table[i].code), table[i].exit,
                 "%s (%d) gives exit %d, expected %d",
                 bk_error_name(table[i].code), table[i].code,
                 bk_error_exit(table[i].code), table[i].exit);
}

/* Codes with a system errno are that errno, so a system call's -errno
 * needs no second comparison. */
Test(error, system_codes_are_negative_errno) {
  cr_expect_eq(BK_ENOMEM, -ENOMEM);
  cr_expect_eq(BK_EINVAL, -EINVAL);
  cr_expect_eq(BK_EIO, -EIO);
  cr_expect_eq(BK_ENOSPC, -ENOSPC);
  cr_expect_eq(BK_ENOTFOUND, -ENOENT);
  cr_expect_eq(BK_EPROTO, -EPROTO);
  cr_expect_str_eq(bk_strerror(-ENOSPC), "no space left on device");
  cr_expect_str_eq(bk_error_name(-ENOSPC), "ENOSPC");
  /* A system errno brink has no name for reads as the system's text. */
  cr_expect_str_eq(bk_strerror(-EBADF), strerror(EBADF));
}

/* brink's own codes lie below every errno and are all distinct. */
Test(error, own_codes_are_distinct) {
  int codes[] = {
#define XX(name, value, text) BK_##name,
      BK_ERRNO_MAP(XX)
#undef XX
  };
  size_t n = sizeof codes / sizeof codes[0];
  for (size_t i = 0; i < n; i++) {
    cr_expect_lt(codes[i], 0);
    cr_expect_str_neq(bk_strerror(codes[i]), "unknown error");
    for (size_t j = i + 1; j < n; j++)
      cr_expect_neq(codes[i], codes[j], "%s and %s share a value",
                    bk_error_name(codes[i]), bk_error_name(codes[j]));
  }
}

Test(error, first_error_is_kept) {
  bk_error_t e;
  bk_error_clear(&e);
  cr_expect_eq(bk_error_set(&e, BK_ESTUDY, "s.yaml", 3, 7, "bad %s", "key"),
               BK_ESTUDY);
  bk_error_set(&e, BK_EIO, NULL, 0, 0, "later");
  cr_expect_eq(e.code, BK_ESTUDY);
  cr_expect_str_eq(e.msg, "bad key");
  cr_expect_eq(e.line, 3);
  cr_expect_eq(e.col, 7);
}
