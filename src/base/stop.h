/*
 * Stop requests from the user. The first SIGINT, SIGTERM or SIGUSR1 sets a
 * flag that loops poll at safe points: stop dispatching, stop children,
 * flush, exit 3. The second kills every registered model process group
 * with SIGKILL and exits at once with status 3. The handlers are
 * async-signal-safe; the flags are lock-free C11 atomics, so any thread
 * may read them.
 *
 * Only signals set these flags. A failure inside brink that must end a
 * run (records that cannot be written, a full disk) cancels the executor
 * instead (bk_exec_cancel in eval/exec.h), so the user's first Ctrl-C
 * after it still counts as the first.
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
/* Process groups to SIGKILL on a second signal (fixed table, up to 4096).
 * Unregister a group before its leader is reaped: its id may be reused
 * after that. */
void bk_stop_register_pgid(pid_t pgid);
void bk_stop_unregister_pgid(pid_t pgid);

/* For tests only: acts as if `sig` had come as the first signal; 0 clears
 * every request. */
void bk__stop_set(int sig);

#endif
