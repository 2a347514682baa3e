/*
 * MPI calls (see mpi_comm.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/mpi_comm.h"

#include <stdio.h>

#include "base/alloc.h"
#include "base/error.h"

#ifdef BK_HAVE_MPI

#include <mpi.h>

static int abandoned;

int bk_mpi_available(void) {
  return 1;
}

static const char *level_name(int level) {
  switch (level) {
  case MPI_THREAD_SINGLE:
    return "MPI_THREAD_SINGLE";
  case MPI_THREAD_FUNNELED:
    return "MPI_THREAD_FUNNELED";
  case MPI_THREAD_SERIALIZED:
    return "MPI_THREAD_SERIALIZED";
  case MPI_THREAD_MULTIPLE:
    return "MPI_THREAD_MULTIPLE";
  default:
    return "an unknown level";
  }
}

int bk_mpi_init(int *rank, int *size, char *why, size_t cap) {
  *rank = 0;
  *size = 1;
  int provided = MPI_THREAD_SINGLE;
  if (MPI_Init_thread(NULL, NULL, MPI_THREAD_FUNNELED, &provided) !=
      MPI_SUCCESS) {
    snprintf(why, cap, "MPI did not start (MPI_Init_thread failed)");
    return BK_EIO;
  }
  /* The levels are ordered: SINGLE < FUNNELED < SERIALIZED < MULTIPLE. */
  if (provided < MPI_THREAD_FUNNELED) {
    snprintf(why, cap,
             "this MPI offers %s, and brink needs at least "
             "MPI_THREAD_FUNNELED (its executor's libuv loop runs beside "
             "MPI in the same process); use an MPI built with thread "
             "support",
             level_name(provided));
    MPI_Finalize();
    return BK_EIO;
  }
  MPI_Comm_set_errhandler(MPI_COMM_WORLD, MPI_ERRORS_ARE_FATAL);
  MPI_Comm_rank(MPI_COMM_WORLD, rank);
  MPI_Comm_size(MPI_COMM_WORLD, size);
  return 0;
}

void bk_mpi_finalize(void) {
  if (!abandoned)
    MPI_Finalize();
}

void bk_mpi_abandon(void) {
  abandoned = 1;
}

int bk_mpi_abandoned(void) {
  return abandoned;
}

int bk_mpi_size(void) {
  int size = 1;
  MPI_Comm_size(MPI_COMM_WORLD, &size);
  return size;
}

void bk_mpi_send(int dest, int tag, const void *data, size_t n) {
  MPI_Send(n ? data : "", (int)n, MPI_BYTE, dest, tag, MPI_COMM_WORLD);
}

int bk_mpi_probe(int source, int tag, bk_mpi_msg_t *m) {
  int flag = 0, count = 0;
  MPI_Status st;
  MPI_Iprobe(source == BK_MPI_ANY ? MPI_ANY_SOURCE : source,
             tag == BK_MPI_ANY ? MPI_ANY_TAG : tag, MPI_COMM_WORLD, &flag, &st);
  if (!flag)
    return 0;
  MPI_Get_count(&st, MPI_BYTE, &count);
  m->source = st.MPI_SOURCE;
  m->tag = st.MPI_TAG;
  m->len = count > 0 ? (size_t)count : 0;
  return 1;
}

int bk_mpi_recv(const bk_mpi_msg_t *m, char **data) {
  *data = NULL;
  char *p = bk_malloc(m->len + 1);
  if (!p)
    return BK_ENOMEM;
  MPI_Recv(p, (int)m->len, MPI_BYTE, m->source, m->tag, MPI_COMM_WORLD,
           MPI_STATUS_IGNORE);
  p[m->len] = '\0';
  *data = p;
  return 0;
}

#else /* no MPI */

int bk_mpi_available(void) {
  return 0;
}
int bk_mpi_init(int *rank, int *size, char *why, size_t cap) {
  *rank = 0;
  *size = 1;
  snprintf(why, cap, "this brink was built without MPI");
  return BK_EINVAL;
}
void bk_mpi_finalize(void) {
}
void bk_mpi_abandon(void) {
}
int bk_mpi_abandoned(void) {
  return 0;
}
int bk_mpi_size(void) {
  return 1;
}
void bk_mpi_send(int dest, int tag, const void *data, size_t n) {
  (void)dest;
  (void)tag;
  (void)data;
  (void)n;
}
int bk_mpi_probe(int source, int tag, bk_mpi_msg_t *m) {
  (void)source;
  (void)tag;
  (void)m;
  return 0;
}
int bk_mpi_recv(const bk_mpi_msg_t *m, char **data) {
  (void)m;
  *data = NULL;
  return BK_EINVAL;
}

#endif
