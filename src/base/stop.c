/*
 * Stop requests from signals (see stop.h).
 *
 * SPDX-License-Identifier: MIT
 */
#define _POSIX_C_SOURCE 200809L
#include "base/stop.h"

#include <signal.h>
#include <string.h>
#include <unistd.h>

#define MAX_PGIDS 4096

static volatile sig_atomic_t stop_sig;
static volatile sig_atomic_t nsignals;
static volatile sig_atomic_t pgids[MAX_PGIDS];

static void on_signal(int sig) {
  if (nsignals++ == 0) {
    stop_sig = sig;
    return;
  }
  for (int i = 0; i < MAX_PGIDS; i++)
    if (pgids[i] > 0)
      kill(-(pid_t)pgids[i], SIGKILL);
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
  return stop_sig != 0;
}

int bk_stop_signal(void) {
  return stop_sig;
}

void bk_stop_set(int sig) {
  stop_sig = sig;
  nsignals = sig ? 1 : 0;
}

void bk_stop_register_pgid(pid_t pgid) {
  for (int i = 0; i < MAX_PGIDS; i++)
    if (pgids[i] == 0) {
      pgids[i] = pgid;
      return;
    }
}

void bk_stop_unregister_pgid(pid_t pgid) {
  for (int i = 0; i < MAX_PGIDS; i++)
    if (pgids[i] == pgid) {
      pgids[i] = 0;
      return;
    }
}
