/*
 * Stop requests from signals (see stop.h).
 *
 * SPDX-License-Identifier: MIT
 */
#define _POSIX_C_SOURCE 200809L
#include "base/stop.h"

#include <signal.h>
#include <stdatomic.h>
#include <string.h>
#include <unistd.h>

/* A signal handler may only touch lock-free atomics (C11 7.14.1.1). */
_Static_assert(ATOMIC_INT_LOCK_FREE == 2, "atomic int must be lock-free");
_Static_assert(sizeof(pid_t) <= sizeof(int), "a pid must fit in an int");

#define MAX_PGIDS 4096

static atomic_int stop_sig;
static atomic_int nsignals;
static atomic_int pgids[MAX_PGIDS];

static void on_signal(int sig) {
  if (atomic_fetch_add(&nsignals, 1) == 0) {
    atomic_store(&stop_sig, sig);
    return;
  }
  for (int i = 0; i < MAX_PGIDS; i++) {
    int pg = atomic_load(&pgids[i]);
    if (pg > 0)
      kill(-(pid_t)pg, SIGKILL);
  }
  static const char msg[] = "brink: second signal, stopped at once; run the "
                            "same command again to resume\n";
  ssize_t w = write(2, msg, sizeof msg - 1);
  (void)w;
  _exit(3);
}

void bk_stop_install(void) {
  struct sigaction sa;
  memset(&sa, 0, sizeof sa);
  sa.sa_handler = on_signal;
  sigemptyset(&sa.sa_mask);
  sa.sa_flags = SA_RESTART;
  sigaction(SIGINT, &sa, NULL);
  sigaction(SIGTERM, &sa, NULL);
  sigaction(SIGUSR1, &sa, NULL);
}

int bk_stop_requested(void) {
  return atomic_load(&stop_sig) != 0;
}

int bk_stop_signal(void) {
  return atomic_load(&stop_sig);
}

void bk__stop_set(int sig) {
  atomic_store(&nsignals, sig ? 1 : 0);
  atomic_store(&stop_sig, sig);
}

void bk_stop_register_pgid(pid_t pgid) {
  for (int i = 0; i < MAX_PGIDS; i++) {
    int free_slot = 0;
    if (atomic_compare_exchange_strong(&pgids[i], &free_slot, (int)pgid))
      return;
  }
}

void bk_stop_unregister_pgid(pid_t pgid) {
  for (int i = 0; i < MAX_PGIDS; i++) {
    int want = (int)pgid;
    if (atomic_compare_exchange_strong(&pgids[i], &want, 0))
      return;
  }
}
