/*
 * Stop requests. The first SIGINT, SIGTERM or SIGUSR1 sets a flag that
 * loops poll at safe points: stop dispatching, stop children, flush, exit 3.
 * The second kills every registered model process group with SIGKILL and
 * exits at once with status 3. The handlers are async-signal-safe.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_STOP_H
#define BK_STOP_H

#include <sys/types.h>

void bk_stop_install(void);
int bk_stop_requested(void);
/* The signal that requested the stop, or 0. */
int bk_stop_signal(void);
/* For tests: request a stop as if a signal came; 0 clears. */
void bk_stop_set(int sig);
/* Process groups to SIGKILL on a second signal (fixed table, up to 4096). */
void bk_stop_register_pgid(pid_t pgid);
void bk_stop_unregister_pgid(pid_t pgid);

#endif
