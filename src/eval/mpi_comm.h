/*
 * The one file that speaks to MPI: starting and ending it, and moving
 * byte messages between ranks of MPI_COMM_WORLD without ever blocking in
 * a receive (a blocking receive in OpenMPI spins a core). The coordinator
 * and the worker (mpi_coord.h, mpi_worker.h) build on these calls and the
 * messages of mpi_wire.h; nothing else includes mpi.h.
 *
 * Only the thread that started MPI calls into it (MPI_THREAD_FUNNELED):
 * a worker watches for a stop from the executor's poll callback, on the
 * main thread, not from a thread of its own.
 *
 * Built only when meson finds MPI (BK_HAVE_MPI); without it
 * bk_mpi_available() is 0 and bk_mpi_init fails.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_MPI_COMM_H
#define BK_MPI_COMM_H

#include <stddef.h>

/* Any source or any tag, for bk_mpi_probe. */
#define BK_MPI_ANY (-1)

/* 1 when this brink was built with MPI. */
int bk_mpi_available(void);

/* Starts MPI, needing MPI_THREAD_FUNNELED; *rank and *size of the world.
 * Returns 0, or a negative code with the reason in why (BK_EINVAL without
 * MPI, BK_EIO when MPI does not start or offers too low a thread level;
 * MPI is then ended again). */
int bk_mpi_init(int *rank, int *size, char *why, size_t cap);
/* Ends MPI, unless bk_mpi_abandon was called. */
void bk_mpi_finalize(void);
/* A rank stopped answering: end without MPI's goodbye, which would wait
 * for it forever (the launcher ends the job). */
void bk_mpi_abandon(void);
/* 1 after bk_mpi_abandon. */
int bk_mpi_abandoned(void);

/* The number of ranks. */
int bk_mpi_size(void);

/* Sends n bytes to rank `dest` with `tag` (blocking until the bytes may
 * be reused; messages are small). */
void bk_mpi_send(int dest, int tag, const void *data, size_t n);

/* A message that has arrived and is not received yet. Receiving from its
 * source with its tag gets this very message: MPI keeps the order of the
 * messages between two ranks. */
typedef struct {
  int source;
  int tag;
  size_t len;
} bk_mpi_msg_t;

/* Looks for a message from `source` with `tag` (either BK_MPI_ANY)
 * without waiting. Returns 1 and fills *m when one has arrived, else 0. */
int bk_mpi_probe(int source, int tag, bk_mpi_msg_t *m);
/* Receives the message found by bk_mpi_probe into a new buffer of m->len
 * bytes plus a NUL (freed with bk_free). Returns 0 or BK_ENOMEM (the
 * message then stays queued; the caller ends the run). */
int bk_mpi_recv(const bk_mpi_msg_t *m, char **data);

#endif
