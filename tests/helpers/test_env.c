/*
 * Linked into every test program: before main, each path variable the
 * tests read (BRINK_EXE, BRINK_TEST_MODEL, BRINK_SOURCE_ROOT,
 * BRINK_FIXTURES, BRINK_BUILD_ROOT) that the environment does not set is
 * set to the value meson compiled in (-DBK_TEST_NAME, tests/meson.build),
 * so that build/tests/test_NAME runs by hand as under meson test. Brink
 * and the helper model started by the tests inherit them.
 *
 * SPDX-License-Identifier: MIT
 */
#include <stdlib.h>

static void set_default(const char *name, const char *value) {
  if (value[0])
    setenv(name, value, 0);
}

#ifndef BK_TEST_BRINK_EXE
#define BK_TEST_BRINK_EXE ""
#endif
#ifndef BK_TEST_BRINK_TEST_MODEL
#define BK_TEST_BRINK_TEST_MODEL ""
#endif
#ifndef BK_TEST_BRINK_SOURCE_ROOT
#define BK_TEST_BRINK_SOURCE_ROOT ""
#endif
#ifndef BK_TEST_BRINK_FIXTURES
#define BK_TEST_BRINK_FIXTURES ""
#endif
#ifndef BK_TEST_BRINK_BUILD_ROOT
#define BK_TEST_BRINK_BUILD_ROOT ""
#endif

__attribute__((constructor)) static void bk_test_env_defaults(void) {
  set_default("BRINK_EXE", BK_TEST_BRINK_EXE);
  set_default("BRINK_TEST_MODEL", BK_TEST_BRINK_TEST_MODEL);
  set_default("BRINK_SOURCE_ROOT", BK_TEST_BRINK_SOURCE_ROOT);
  set_default("BRINK_FIXTURES", BK_TEST_BRINK_FIXTURES);
  set_default("BRINK_BUILD_ROOT", BK_TEST_BRINK_BUILD_ROOT);
}
