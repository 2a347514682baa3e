/*
 * The record log of a study (see records.h; the format is described for
 * users in docs/records.md). The log is a text file: '#' header lines with
 * the format version and the study fingerprint, one line of column names,
 * then one TAB-separated line per finished evaluation ending in a CRC-32C
 * of the line. Lines are only ever appended, each with a single write(2),
 * so after a crash only the last line can be incomplete.
 *
 * Opening streams through the file once, checking each line's checksum and
 * field count and hashing its key; fields are parsed only when a record is
 * looked up or scanned. The index keeps, per line, its file offset (8
 * bytes) and one bit saying whether a later line superseded it, plus an
 * open-addressing hash table of 8-byte slots at most half full: under 50
 * bytes per record. Keys are not stored: a hash hit is confirmed by reading
 * the key back from the file with pread(2).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/records.h"

#include <errno.h>
#include <fcntl.h>
#include <inttypes.h>
#include <limits.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/fault.h"

#define FORMAT_MAGIC "# brink-records "
/* The version new logs get. Version 1 logs (one `note` column where
 * version 2 has `reason` and `folder`) are still read, and appended to in
 * their own format, so a run started by an earlier brink resumes. */
#define FORMAT_VERSION 2
#define FORMAT_OLDEST  1
/* key status attempts seconds host g, before the x values. */
#define NFIXED 6
/* The text columns after the outputs, before crc: `reason` and `folder`
 * (version 2), or `note` (version 1). */
#define NTEXT(version) ((version) >= 2 ? 2 : 1)
/* How a version 1 note joined the reason and the folder. */
#define NOTE_FOLDER "folder "
#define NOTE_JOIN   "; folder "
/* The checksum field: TAB, 8 hex digits, newline. */
#define CRC_TAIL      10
#define READ_CHUNK    (1u << 20)
#define MAX_DIRS      64
#define LOCK_TEXT_MAX 512

/* ---- CRC-32C ----------------------------------------------------------- */

/* CRC-32C, reflected polynomial 0x82F63B78 (Castagnoli, Braeutigam and
 * Herrmann 1993; the iSCSI checksum of RFC 3720), computed eight bytes at
 * a time with the "slicing-by-8" tables of Kounavis and Berry (2005).
 * table[0] is the classic byte table; table[k][b] is the CRC of byte b
 * followed by k zero bytes. Filled on first use; records are used from
 * the coordinator thread only. */
static uint32_t crc_table[8][256];
static int crc_ready;

static void crc_init(void) {
  for (uint32_t i = 0; i < 256; i++) {
    uint32_t c = i;
    for (int k = 0; k < 8; k++)
      c = (c & 1) ? (c >> 1) ^ 0x82F63B78u : c >> 1;
    crc_table[0][i] = c;
  }
  for (int i = 0; i < 256; i++)
    for (int k = 1; k < 8; k++)
      crc_table[k][i] =
          (crc_table[k - 1][i] >> 8) ^ crc_table[0][crc_table[k - 1][i] & 0xff];
  crc_ready = 1;
}

uint32_t bk_records_crc32c(uint32_t crc, const void *data, size_t n) {
  if (!crc_ready)
    crc_init();
  const unsigned char *p = data;
  crc = ~crc;
  while (n >= 8) {
    /* Assembled byte by byte so that the result does not depend on the
     * machine's byte order; compilers turn this into one load. */
    uint32_t lo = crc ^ ((uint32_t)p[0] | (uint32_t)p[1] << 8 |
                         (uint32_t)p[2] << 16 | (uint32_t)p[3] << 24);
    uint32_t hi = (uint32_t)p[4] | (uint32_t)p[5] << 8 | (uint32_t)p[6] << 16 |
                  (uint32_t)p[7] << 24;
    crc = crc_table[7][lo & 0xff] ^ crc_table[6][(lo >> 8) & 0xff] ^
          crc_table[5][(lo >> 16) & 0xff] ^ crc_table[4][lo >> 24] ^
          crc_table[3][hi & 0xff] ^ crc_table[2][(hi >> 8) & 0xff] ^
          crc_table[1][(hi >> 16) & 0xff] ^ crc_table[0][hi >> 24];
    p += 8;
    n -= 8;
  }
  while (n--)
    crc = crc_table[0][(crc ^ *p++) & 0xff] ^ (crc >> 8);
  return ~crc;
}

/* ---- Test hook --------------------------------------------------------- */

static bk__records_write_fn write_fn = write;

void bk__records_set_write(bk__records_write_fn fn) {
  write_fn = fn ? fn : write;
}

/* ---- The records object ------------------------------------------------ */

/* Storage that a parsed line's bk_record_t points into. */
typedef struct {
  bk_buf_t line; /* the raw line, split in place at its TABs */
  double *x;
  double *y;
  bk_record_t rec;
} parsed_t;

/* One hash table slot: `line` is 1 + the index of the line holding the
 * key (0: empty); `hash` is the key's 32-bit hash, which also gives the
 * home bucket, so the table can grow without reading keys back. */
typedef struct {
  uint32_t line;
  uint32_t hash;
} slot_t;

/*
 * Invariants, once open has succeeded:
 * - offs[0..nlines) are the offsets of the record lines known to be whole
 *   and checksummed, in log order; offs[nlines] is the end of the last one,
 *   which is where the next append goes (and, unless read_only, the end of
 *   the file). Line i spans [offs[i], offs[i+1]) including its newline.
 * - Bit i of `dead` is set when a later line has the same key; scan skips
 *   such lines and the table never points at them.
 * - The table holds exactly `count` slots, one per distinct key, and
 *   count <= nslots / 2.
 */
struct bk_records {
  /* read-only after open */
  int version; /* of the log's format: FORMAT_OLDEST..FORMAT_VERSION */
  char *path;
  char *lock_path;
  char *lock_text; /* "host:pid\n" when we hold the lock */
  int fd;
  int read_only;
  double sync_interval;
  size_t nx;
  size_t ny;
  char **xnames;
  char **ynames;
  bk_fingerprint_part_t *parts;
  size_t nparts;
  char *tool;
  char *created;
  size_t dropped;
  /* the index */
  uint64_t *offs;
  uint8_t *dead;
  size_t nlines;
  size_t cap_lines;
  slot_t *slots;
  size_t nslots;
  size_t count;
  /* the writer */
  int dirty;
  int broken; /* negative code when an earlier write left the log unsure */
  double last_sync;
  bk_buf_t wbuf;
  bk_buf_t kbuf;
  /* read storage */
  parsed_t found;
  parsed_t scanned;
  bk_buf_t sbuf;     /* scan's read buffer */
  uint64_t sbuf_off; /* file offset of sbuf.data[0] */
};

static double now_seconds(void) {
  struct timespec ts;
  clock_gettime(CLOCK_MONOTONIC, &ts);
  return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* FNV-1a over the key, finished with the 64-bit mixer of MurmurHash3
 * (Appleby) so that the low bits used for buckets are well spread. */
static uint32_t hash_key(const char *key, size_t n) {
  uint64_t h = 0xcbf29ce484222325u;
  for (size_t i = 0; i < n; i++) {
    h ^= (unsigned char)key[i];
    h *= 0x100000001b3u;
  }
  h ^= h >> 33;
  h *= 0xff51afd7ed558ccdu;
  h ^= h >> 33;
  h *= 0xc4ceb9fe1a85ec53u;
  h ^= h >> 33;
  return (uint32_t)h;
}

/* ---- Low-level I/O ----------------------------------------------------- */

/* Reads n bytes at `off`; returns the count read (short only at end of
 * file) or -errno. */
static ssize_t pread_all(int fd, void *buf, size_t n, uint64_t off) {
  size_t got = 0;
  while (got < n) {
    ssize_t k = pread(fd, (char *)buf + got, n - got, (off_t)(off + got));
    if (k < 0 && errno == EINTR)
      continue;
    if (k < 0)
      return -errno;
    if (k == 0)
      break;
    got += (size_t)k;
  }
  return (ssize_t)got;
}

/* Writes all n bytes through write_fn; returns 0 or -errno. Partial
 * writes continue where they stopped (the fd is O_APPEND and we are the
 * only writer). */
static int write_all(int fd, const char *p, size_t n) {
  while (n > 0) {
    ssize_t k = write_fn(fd, p, n);
    if (k < 0 && errno == EINTR)
      continue;
    if (k < 0)
      return -errno;
    if (k == 0)
      return -EIO;
    p += k;
    n -= (size_t)k;
  }
  return 0;
}

static int fsync_dir_of(const char *path) {
  const char *slash = strrchr(path, '/');
  char *dir = slash
                  ? bk_strndup(path, slash == path ? 1 : (size_t)(slash - path))
                  : bk_strdup(".");
  if (!dir)
    return BK_ENOMEM;
  int rc = 0;
  int fd = open(dir, O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (fd >= 0) {
    if (fsync(fd) != 0 && errno != EINVAL && errno != EROFS)
      rc = -errno;
    close(fd);
  }
  bk_free(dir);
  return rc;
}

/* A streaming line reader over a file descriptor. */
typedef struct {
  int fd;
  char *buf;
  size_t cap;
  size_t start;   /* first byte not yet returned */
  size_t len;     /* bytes in buf */
  size_t scanned; /* bytes after start known to hold no newline */
  uint64_t off;   /* file offset of buf[0] */
  int eof;
} reader_t;

static int reader_init(reader_t *rd, int fd) {
  memset(rd, 0, sizeof *rd);
  rd->fd = fd;
  rd->cap = READ_CHUNK;
  rd->buf = bk_malloc(rd->cap);
  return rd->buf ? 0 : BK_ENOMEM;
}

static void reader_close(reader_t *rd) {
  bk_free(rd->buf);
  rd->buf = NULL;
}

/* Returns 1 with the next line (its newline included when present; only
 * the last line of the file can lack one), 0 at the end, or a negative
 * code. The line stays valid until the next call. */
static int reader_next(reader_t *rd, const char **line, size_t *len,
                       uint64_t *off) {
  for (;;) {
    char *from = rd->buf + rd->start + rd->scanned;
    char *nl = memchr(from, '\n', rd->len - rd->start - rd->scanned);
    if (nl || (rd->eof && rd->len > rd->start)) {
      size_t n =
          nl ? (size_t)(nl - (rd->buf + rd->start)) + 1 : rd->len - rd->start;
      *line = rd->buf + rd->start;
      *len = n;
      *off = rd->off + rd->start;
      rd->start += n;
      rd->scanned = 0;
      return 1;
    }
    if (rd->eof)
      return 0;
    rd->scanned = rd->len - rd->start;
    if (rd->start > 0) {
      memmove(rd->buf, rd->buf + rd->start, rd->len - rd->start);
      rd->off += rd->start;
      rd->len -= rd->start;
      rd->start = 0;
    }
    if (rd->len == rd->cap) {
      char *p = bk_realloc(rd->buf, rd->cap * 2);
      if (!p)
        return BK_ENOMEM;
      rd->buf = p;
      rd->cap *= 2;
    }
    ssize_t k;
    do
      k = read(rd->fd, rd->buf + rd->len, rd->cap - rd->len);
    while (k < 0 && errno == EINTR);
    if (k < 0)
      return -errno;
    if (k == 0)
      rd->eof = 1;
    rd->len += (size_t)k;
  }
}

/* ---- Encoding ---------------------------------------------------------- */

/* Text fields (host, reason, folder, names) are written with \\, \t, \n, \r and
 * \xHH for other control bytes, '#' and '"', so that a line never holds a TAB
 * or newline of its own, every '#' in the file starts a header line (tools
 * that treat '#' as a comment anywhere read the log unharmed), and no field
 * starts with a quote that CSV readers would take as quoting. */
static int put_escaped(bk_buf_t *b, const char *s) {
  static const char hex[] = "0123456789abcdef";
  for (const unsigned char *p = (const unsigned char *)s; *p; p++) {
    char esc[4] = {'\\', 0, 0, 0};
    size_t n = 2;
    switch (*p) {
    case '\\':
      esc[1] = '\\';
      break;
    case '\t':
      esc[1] = 't';
      break;
    case '\n':
      esc[1] = 'n';
      break;
    case '\r':
      esc[1] = 'r';
      break;
    default:
      if (*p >= 0x20 && *p != 0x7f && *p != '#' && *p != '"') {
        if (bk_buf_putc(b, (char)*p))
          return BK_ENOMEM;
        continue;
      }
      esc[1] = 'x';
      esc[2] = hex[*p >> 4];
      esc[3] = hex[*p & 15];
      n = 4;
    }
    if (bk_buf_append(b, esc, n))
      return BK_ENOMEM;
  }
  return 0;
}

static int hex_value(char c) {
  if (c >= '0' && c <= '9')
    return c - '0';
  if (c >= 'a' && c <= 'f')
    return c - 'a' + 10;
  if (c >= 'A' && c <= 'F')
    return c - 'A' + 10;
  return -1;
}

/* Undoes put_escaped in place (the text only shrinks). An unknown escape
 * is kept as written. */
static void unescape(char *s) {
  char *out = s;
  while (*s) {
    if (*s != '\\' || !s[1]) {
      *out++ = *s++;
      continue;
    }
    char c = s[1];
    if (c == 'x' && hex_value(s[2]) >= 0 && hex_value(s[3]) >= 0) {
      *out++ = (char)(hex_value(s[2]) * 16 + hex_value(s[3]));
      s += 4;
      continue;
    }
    char v = c == '\\'  ? '\\'
             : c == 't' ? '\t'
             : c == 'n' ? '\n'
             : c == 'r' ? '\r'
                        : 0;
    if (v) {
      *out++ = v;
      s += 2;
    } else {
      *out++ = *s++;
    }
  }
  *out = '\0';
}

/* Writes the shortest of %.15g, %.16g, %.17g that reads back as the same
 * double, so 0.1 stays "0.1" and every value round-trips exactly. The sign
 * of zero is kept; NaN is "nan" (its sign and payload are not kept).
 * brink never calls setlocale(), so the decimal point is '.'. */
static int put_double(bk_buf_t *b, double v) {
  if (isnan(v))
    return bk_buf_puts(b, "nan");
  if (isinf(v))
    return bk_buf_puts(b, v < 0 ? "-inf" : "inf");
  char tmp[40];
  for (int prec = 15; prec <= 17; prec++) {
    snprintf(tmp, sizeof tmp, "%.*g", prec, v);
    if (prec == 17 || strtod(tmp, NULL) == v)
      break;
  }
  return bk_buf_puts(b, tmp);
}

/* A key is non-empty and holds no blank, control byte or '#': it is
 * written unescaped as the first field, and is what users grep for. */
static int key_is_valid(const char *key) {
  if (!key || !*key)
    return 0;
  for (const unsigned char *p = (const unsigned char *)key; *p; p++)
    if (*p <= 0x20 || *p == 0x7f || *p == '#')
      return 0;
  return 1;
}

static int put_crc_tail(bk_buf_t *b, size_t from) {
  uint32_t crc = bk_records_crc32c(0, b->data + from, b->len - from);
  return bk_buf_printf(b, "\t%08" PRIx32 "\n", crc);
}

/* The note of a version 1 line: "REASON; folder PATH", "folder PATH",
 * "REASON" or "". */
static int put_note(bk_buf_t *b, const char *reason, const char *folder) {
  int rc = put_escaped(b, reason);
  if (*folder) {
    rc |= bk_buf_puts(b, *reason ? NOTE_JOIN : NOTE_FOLDER);
    rc |= put_escaped(b, folder);
  }
  return rc;
}

/* Appends the encoded line of rec, in format `version`, to b. On failure b
 * may hold a partial line; the caller resets it. */
static int encode_into(bk_buf_t *b, const bk_record_t *rec, int version) {
  if (!key_is_valid(rec->key) || rec->fault < 0 ||
      rec->fault >= BK_FAULT__COUNT || rec->attempts < 0 ||
      (rec->nx && !rec->x) || (rec->ny && !rec->y))
    return BK_EINVAL;
  size_t from = b->len;
  int rc = 0;
  rc |= bk_buf_printf(b, "%s\t%s\t%d\t", rec->key, bk_fault_name(rec->fault),
                      rec->attempts);
  rc |= put_double(b, rec->seconds);
  rc |= bk_buf_putc(b, '\t');
  rc |= put_escaped(b, rec->host ? rec->host : "");
  rc |= bk_buf_putc(b, '\t');
  rc |= put_double(b, rec->g);
  for (size_t i = 0; i < rec->nx; i++) {
    rc |= bk_buf_putc(b, '\t');
    rc |= put_double(b, rec->x[i]);
  }
  for (size_t i = 0; i < rec->ny; i++) {
    rc |= bk_buf_putc(b, '\t');
    rc |= put_double(b, rec->y[i]);
  }
  const char *reason = rec->reason ? rec->reason : "";
  const char *folder = rec->folder ? rec->folder : "";
  rc |= bk_buf_putc(b, '\t');
  if (version >= 2) {
    rc |= put_escaped(b, reason);
    rc |= bk_buf_putc(b, '\t');
    rc |= put_escaped(b, folder);
  } else {
    rc |= put_note(b, reason, folder);
  }
  if (rc)
    return BK_ENOMEM;
  return put_crc_tail(b, from);
}

int bk_records_encode(const bk_record_t *rec, char **line, size_t *len) {
  *line = NULL;
  *len = 0;
  bk_buf_t b;
  bk_buf_init(&b);
  int rc = encode_into(&b, rec, FORMAT_VERSION);
  if (rc) {
    bk_buf_close(&b);
    return rc;
  }
  *line = b.data;
  *len = b.len;
  return 0;
}

/* ---- Decoding ---------------------------------------------------------- */

static int parse_double(const char *s, double *v) {
  char *end;
  *v = strtod(s, &end);
  return end != s && *end == '\0' ? 0 : -1;
}

static int parse_int(const char *s, int *v) {
  char *end;
  errno = 0;
  long l = strtol(s, &end, 10);
  if (end == s || *end || errno || l < 0 || l > INT_MAX)
    return -1;
  *v = (int)l;
  return 0;
}

/* Splits a version 1 note, in place, into the record's reason and folder
 * (see put_note). A reason that itself held "; folder " is cut at the last
 * one, which is where brink put the folder. */
static void split_note(char *note, bk_record_t *rec) {
  unescape(note);
  rec->reason = note;
  rec->folder = "";
  size_t nf = sizeof NOTE_FOLDER - 1, nj = sizeof NOTE_JOIN - 1;
  if (strncmp(note, NOTE_FOLDER, nf) == 0) {
    rec->reason = "";
    rec->folder = note + nf;
    return;
  }
  char *last = NULL;
  for (char *p = note; (p = strstr(p, NOTE_JOIN)); p++)
    last = p;
  if (last) {
    *last = '\0';
    rec->folder = last + nj;
  }
}

/* Parses line [data, data+n) (newline included) into p. Returns 0, or -1
 * when the line is not a record of this log's shape (a line that passed
 * its checksum can fail here only if it was written by another program). */
static int parse_line(const bk_records_t *r, parsed_t *p, const char *data,
                      size_t n) {
  if (n < CRC_TAIL + 1 || data[n - 1] != '\n')
    return -1;
  bk_buf_reset(&p->line);
  if (bk_buf_append(&p->line, data, n - CRC_TAIL))
    return -1;
  /* Fields key..folder: NFIXED + nx + ny + NTEXT of them. */
  size_t ntext = NTEXT(r->version);
  size_t want = NFIXED + r->nx + r->ny + ntext, k = 0;
  char *fixed[NFIXED + 2];
  char *s = p->line.data;
  for (;;) {
    char *tab = strchr(s, '\t');
    if (tab)
      *tab = '\0';
    if (k < NFIXED) {
      fixed[k] = s;
    } else if (k < NFIXED + r->nx) {
      if (parse_double(s, &p->x[k - NFIXED]))
        return -1;
    } else if (k < NFIXED + r->nx + r->ny) {
      if (parse_double(s, &p->y[k - NFIXED - r->nx]))
        return -1;
    } else if (k < want) {
      fixed[k - r->nx - r->ny] = s;
    }
    k++;
    if (!tab)
      break;
    s = tab + 1;
  }
  if (k != want)
    return -1;
  bk_record_t *rec = &p->rec;
  memset(rec, 0, sizeof *rec);
  rec->key = fixed[0];
  rec->fault = bk_fault_from_name(fixed[1]);
  if (rec->fault < 0 || parse_int(fixed[2], &rec->attempts) ||
      parse_double(fixed[3], &rec->seconds) || parse_double(fixed[5], &rec->g))
    return -1;
  unescape(fixed[4]);
  rec->host = fixed[4];
  if (ntext == 2) {
    unescape(fixed[NFIXED]);
    unescape(fixed[NFIXED + 1]);
    rec->reason = fixed[NFIXED];
    rec->folder = fixed[NFIXED + 1];
  } else {
    split_note(fixed[NFIXED], rec);
  }
  rec->nx = r->nx;
  rec->x = p->x;
  rec->ny = r->ny;
  rec->y = p->y;
  return 0;
}

/* Why a body line cannot be used, or NULL when it is a whole, checksummed
 * record with the right number of fields. */
static const char *check_line(const char *line, size_t n, size_t want_tabs) {
  if (n == 0 || line[n - 1] != '\n')
    return "incomplete line";
  if (n < CRC_TAIL + 1 || line[n - CRC_TAIL] != '\t')
    return "no checksum";
  uint32_t want = 0;
  for (size_t i = n - CRC_TAIL + 1; i < n - 1; i++) {
    int h = hex_value(line[i]);
    if (h < 0)
      return "no checksum";
    want = want << 4 | (uint32_t)h;
  }
  size_t body = n - CRC_TAIL;
  if (bk_records_crc32c(0, line, body) != want)
    return "checksum mismatch";
  size_t tabs = 0;
  for (const char *p = line, *end = line + body;
       (p = memchr(p, '\t', (size_t)(end - p))); p++)
    tabs++;
  if (tabs != want_tabs)
    return "wrong number of fields";
  if (line[0] == '\t')
    return "empty key";
  return NULL;
}

/* ---- The index --------------------------------------------------------- */

/* Makes room for one more line in offs/dead and one more key in the table
 * before anything is written, so that adding it cannot fail. */
static int index_reserve(bk_records_t *r) {
  if (r->nlines + 2 > r->cap_lines) {
    size_t cap = r->cap_lines ? r->cap_lines * 2 : 1024;
    if (cap > UINT32_MAX)
      return BK_ERANGE;
    uint64_t *offs = bk_realloc(r->offs, cap * sizeof *offs);
    if (!offs)
      return BK_ENOMEM;
    r->offs = offs;
    uint8_t *dead = bk_realloc(r->dead, cap / 8);
    if (!dead)
      return BK_ENOMEM;
    memset(dead + r->cap_lines / 8, 0, (cap - r->cap_lines) / 8);
    r->dead = dead;
    r->cap_lines = cap;
  }
  if (2 * (r->count + 1) > r->nslots) {
    size_t nslots = r->nslots ? r->nslots * 2 : 1024;
    slot_t *slots = bk_calloc(nslots, sizeof *slots);
    if (!slots)
      return BK_ENOMEM;
    for (size_t i = 0; i < r->nslots; i++) {
      if (!r->slots[i].line)
        continue;
      size_t j = r->slots[i].hash & (nslots - 1);
      while (slots[j].line)
        j = (j + 1) & (nslots - 1);
      slots[j] = r->slots[i];
    }
    bk_free(r->slots);
    r->slots = slots;
    r->nslots = nslots;
  }
  return 0;
}

/* 1 when line `idx` has key [key, key+n), 0 when not, negative on a read
 * error. */
static int line_has_key(bk_records_t *r, size_t idx, const char *key,
                        size_t n) {
  if (r->offs[idx + 1] - r->offs[idx] < n + 1)
    return 0;
  bk_buf_reset(&r->kbuf);
  if (bk_buf_reserve(&r->kbuf, n + 1))
    return BK_ENOMEM;
  ssize_t k = pread_all(r->fd, r->kbuf.data, n + 1, r->offs[idx]);
  if (k < 0)
    return (int)k;
  return (size_t)k == n + 1 && memcmp(r->kbuf.data, key, n) == 0 &&
         r->kbuf.data[n] == '\t';
}

/* Finds the slot of key, or the empty slot where it would go. */
static int index_probe(bk_records_t *r, const char *key, size_t n, uint32_t h,
                       size_t *at) {
  size_t mask = r->nslots - 1;
  for (size_t j = h & mask;; j = (j + 1) & mask) {
    if (!r->slots[j].line) {
      *at = j;
      return 0;
    }
    if (r->slots[j].hash != h)
      continue;
    int rc = line_has_key(r, r->slots[j].line - 1, key, n);
    if (rc < 0)
      return rc;
    if (rc) {
      *at = j;
      return 1;
    }
  }
}

/* Adds line nlines (already at offs[nlines], ending at offs[nlines+1])
 * with the given key. A line with a key seen before supersedes the older
 * line: the later one wins. index_reserve must have succeeded. On a read
 * error (comparing keys) the line is counted but marked superseded. */
static int index_add(bk_records_t *r, const char *key, size_t n) {
  uint32_t h = hash_key(key, n);
  size_t at;
  int found = index_probe(r, key, n, h, &at);
  size_t idx = r->nlines++;
  if (found < 0) {
    /* The line stays counted (offsets must stay right) but unreachable:
     * its evaluation will simply be made again. */
    r->dead[idx / 8] |= (uint8_t)(1u << (idx % 8));
    return found;
  }
  if (found) {
    size_t old = r->slots[at].line - 1;
    r->dead[old / 8] |= (uint8_t)(1u << (old % 8));
  } else {
    r->count++;
  }
  r->slots[at].line = (uint32_t)(idx + 1);
  r->slots[at].hash = h;
  return 0;
}

/* ---- Header ------------------------------------------------------------ */

static int put_header(bk_buf_t *b, const bk_records_opts_t *o) {
  char when[32];
  time_t t = time(NULL);
  struct tm tm;
  gmtime_r(&t, &tm);
  strftime(when, sizeof when, "%Y-%m-%dT%H:%M:%SZ", &tm);
  int rc = bk_buf_printf(b, FORMAT_MAGIC "%d\n# tool ", FORMAT_VERSION);
  rc |= put_escaped(b, o->tool ? o->tool : "brink");
  rc |= bk_buf_printf(b, "\n# created %s\n", when);
  for (size_t i = 0; i < o->nparts; i++) {
    rc |= bk_buf_puts(b, "# part ");
    rc |= put_escaped(b, o->parts[i].name);
    rc |= bk_buf_printf(b, " %s\n", o->parts[i].digest);
  }
  rc |= bk_buf_printf(b, "# inputs %zu\n# outputs %zu\n", o->nx, o->ny);
  rc |= bk_buf_puts(b, "key\tstatus\tattempts\tseconds\thost\tg");
  for (size_t i = 0; i < o->nx; i++) {
    rc |= bk_buf_putc(b, '\t');
    rc |= put_escaped(b, o->xnames[i]);
  }
  for (size_t i = 0; i < o->ny; i++) {
    rc |= bk_buf_putc(b, '\t');
    rc |= put_escaped(b, o->ynames[i]);
  }
  rc |= bk_buf_puts(b, "\treason\tfolder\tcrc\n");
  return rc ? BK_ENOMEM : 0;
}

/* The folder of the log, for messages: "runs/x" for "runs/x/records.log". */
static void folder_of(const char *path, char *out, size_t cap) {
  const char *slash = strrchr(path, '/');
  if (!slash)
    snprintf(out, cap, "%s", path);
  else if (slash == path)
    snprintf(out, cap, "/");
  else
    snprintf(out, cap, "%.*s", (int)(slash - path), path);
}

/* Splits a line of column names (no newline) at its TABs into a new array
 * of unescaped strings; returns the count or a negative code. */
static long split_names(const char *row, char ***out) {
  size_t n = 1;
  for (const char *p = row; *p; p++)
    n += *p == '\t';
  char **v = bk_calloc(n, sizeof *v);
  if (!v)
    return BK_ENOMEM;
  const char *s = row;
  for (size_t i = 0; i < n; i++) {
    const char *tab = strchr(s, '\t');
    size_t len = tab ? (size_t)(tab - s) : strlen(s);
    v[i] = bk_strndup(s, len);
    if (!v[i]) {
      for (size_t j = 0; j < i; j++)
        bk_free(v[j]);
      bk_free(v);
      return BK_ENOMEM;
    }
    unescape(v[i]);
    s += len + 1;
  }
  *out = v;
  return (long)n;
}

static void free_names(char **v, size_t n) {
  if (!v)
    return;
  for (size_t i = 0; i < n; i++)
    bk_free(v[i]);
  bk_free(v);
}

/* What was read from a log's header. */
typedef struct {
  char *tool;
  char *created;
  bk_fingerprint_part_t *parts; /* owned name and digest strings */
  size_t nparts;
  long nx; /* -1 when absent */
  long ny;
  char **columns;
  size_t ncolumns;
} header_t;

static void header_close(header_t *h) {
  bk_free(h->tool);
  bk_free(h->created);
  for (size_t i = 0; i < h->nparts; i++) {
    bk_free((char *)h->parts[i].name);
    bk_free((char *)h->parts[i].digest);
  }
  bk_free(h->parts);
  free_names(h->columns, h->ncolumns);
}

static char *dup_unescaped(const char *s, size_t n) {
  char *p = bk_strndup(s, n);
  if (p)
    unescape(p);
  return p;
}

/* Reads one '#' header line (newline stripped) into h. Unknown lines are
 * ignored, so later versions may add some. */
static int header_line(header_t *h, const char *s, size_t n) {
  if (n > 7 && memcmp(s, "# tool ", 7) == 0 && !h->tool)
    return (h->tool = dup_unescaped(s + 7, n - 7)) ? 0 : BK_ENOMEM;
  if (n > 10 && memcmp(s, "# created ", 10) == 0 && !h->created)
    return (h->created = bk_strndup(s + 10, n - 10)) ? 0 : BK_ENOMEM;
  if (n > 7 && memcmp(s, "# part ", 7) == 0) {
    const char *sp = s + n;
    while (sp > s + 7 && sp[-1] != ' ')
      sp--;
    if (sp <= s + 8 || sp == s + n)
      return 0;
    bk_fingerprint_part_t *parts =
        bk_realloc(h->parts, (h->nparts + 1) * sizeof *parts);
    if (!parts)
      return BK_ENOMEM;
    h->parts = parts;
    char *name = dup_unescaped(s + 7, (size_t)(sp - 1 - (s + 7)));
    char *digest = bk_strndup(sp, (size_t)(s + n - sp));
    if (!name || !digest) {
      bk_free(name);
      bk_free(digest);
      return BK_ENOMEM;
    }
    parts[h->nparts].name = name;
    parts[h->nparts].digest = digest;
    h->nparts++;
    return 0;
  }
  long *count = NULL;
  size_t skip = 0;
  if (n > 9 && memcmp(s, "# inputs ", 9) == 0)
    count = &h->nx, skip = 9;
  else if (n > 10 && memcmp(s, "# outputs ", 10) == 0)
    count = &h->ny, skip = 10;
  if (count) {
    char tmp[32];
    snprintf(tmp, sizeof tmp, "%.*s", (int)(n - skip), s + skip);
    int v;
    if (parse_int(tmp, &v) == 0)
      *count = v;
  }
  return 0;
}

static const char *part_digest(const bk_fingerprint_part_t *parts, size_t n,
                               const char *name) {
  for (size_t i = 0; i < n; i++)
    if (strcmp(parts[i].name, name) == 0)
      return parts[i].digest;
  return NULL;
}

static int names_equal(char **have, const char *const *want, size_t n) {
  for (size_t i = 0; i < n; i++)
    if (strcmp(have[i], want[i]) != 0)
      return 0;
  return 1;
}

/* Compares the header with what the caller's study expects; on a
 * difference sets err naming every part that changed. */
static int header_compare(const header_t *h, const bk_records_opts_t *o,
                          bk_error_t *err) {
  char list[600] = "";
  size_t used = 0;
#define ADD_CHANGE(...)                                                        \
  do {                                                                         \
    if (used < sizeof list) {                                                  \
      int k_ =                                                                 \
          snprintf(list + used, sizeof list - used, "%s", used ? ", " : "");   \
      used += (size_t)k_;                                                      \
    }                                                                          \
    if (used < sizeof list)                                                    \
      used += (size_t)snprintf(list + used, sizeof list - used, __VA_ARGS__);  \
  } while (0)
  for (size_t i = 0; i < o->nparts; i++) {
    const char *d = part_digest(h->parts, h->nparts, o->parts[i].name);
    if (!d)
      ADD_CHANGE("%s added", o->parts[i].name);
    else if (strcmp(d, o->parts[i].digest) != 0)
      ADD_CHANGE("%s changed", o->parts[i].name);
  }
  for (size_t i = 0; i < h->nparts; i++)
    if (!part_digest(o->parts, o->nparts, h->parts[i].name))
      ADD_CHANGE("%s removed", h->parts[i].name);
  if (h->nx != (long)o->nx ||
      !names_equal(h->columns + NFIXED, o->xnames, o->nx))
    ADD_CHANGE("inputs changed");
  if (h->ny != (long)o->ny ||
      !names_equal(h->columns + NFIXED + h->nx, o->ynames, o->ny))
    ADD_CHANGE("outputs changed");
#undef ADD_CHANGE
  if (!used)
    return 0;
  char folder[512];
  folder_of(o->path, folder, sizeof folder);
  return bk_error_set(err, BK_EMISMATCH, NULL, 0, 0,
                      "the records in %s were made by a different study: "
                      "%s; use a new run.folder or delete the old one",
                      folder, list);
}

/* ---- Opening ----------------------------------------------------------- */

static int corrupt(bk_error_t *err, const char *path, int line,
                   const char *why) {
  return bk_error_set(err, BK_ECORRUPT, path, line, 0,
                      "damaged record (%s); the log cannot be resumed "
                      "safely. Move it aside to start again",
                      why);
}

static int parsed_init(parsed_t *p, size_t nx, size_t ny) {
  bk_buf_init(&p->line);
  p->x = bk_calloc(nx, sizeof *p->x);
  p->y = bk_calloc(ny, sizeof *p->y);
  return p->x && p->y ? 0 : BK_ENOMEM;
}

static void parsed_close(parsed_t *p) {
  bk_buf_close(&p->line);
  bk_free(p->x);
  bk_free(p->y);
}

/* Reads the header and every record line of r->fd, fills the index, and
 * sets r->dropped for a bad or torn last line. Changes nothing on disk. */
static int load(bk_records_t *r, const bk_records_opts_t *o, bk_error_t *err) {
  reader_t rd;
  header_t h = {.nx = -1, .ny = -1};
  int rc = reader_init(&rd, r->fd);
  if (rc)
    goto done;
  const char *line;
  size_t n;
  uint64_t off;
  int lineno = 0;

  /* The header: '#' lines, then the line of column names. */
  for (;;) {
    rc = reader_next(&rd, &line, &n, &off);
    if (rc < 0)
      goto read_error;
    lineno++;
    if (rc == 0 || line[n - 1] != '\n') {
      rc = bk_error_set(err, BK_ECORRUPT, r->path, lineno, 0,
                        "the header of the records log is incomplete; "
                        "move the log aside to start again");
      goto done;
    }
    n--;
    if (lineno == 1) {
      size_t m = sizeof FORMAT_MAGIC - 1;
      char tmp[32];
      int version;
      snprintf(tmp, sizeof tmp, "%.*s", (int)(n > m ? n - m : 0), line + m);
      if (n <= m || memcmp(line, FORMAT_MAGIC, m) != 0 ||
          parse_int(tmp, &version)) {
        rc = bk_error_set(err, BK_ECORRUPT, r->path, 1, 0,
                          "not a brink records log (the first line should "
                          "be '" FORMAT_MAGIC "%d')",
                          FORMAT_VERSION);
        goto done;
      }
      if (version < FORMAT_OLDEST || version > FORMAT_VERSION) {
        rc = bk_error_set(err, BK_EMISMATCH, r->path, 1, 0,
                          "records format version %d; this brink reads "
                          "versions %d to %d. Use the brink that wrote it, "
                          "or a new run.folder",
                          version, FORMAT_OLDEST, FORMAT_VERSION);
        goto done;
      }
      r->version = version;
      continue;
    }
    if (line[0] != '#')
      break;
    if ((rc = header_line(&h, line, n)))
      goto done;
  }
  char *row = bk_strndup(line, n);
  if (!row) {
    rc = BK_ENOMEM;
    goto done;
  }
  long nc = split_names(row, &h.columns);
  bk_free(row);
  if (nc < 0) {
    rc = (int)nc;
    goto done;
  }
  h.ncolumns = (size_t)nc;
  if (h.nx < 0 || h.ny < 0 ||
      h.ncolumns !=
          NFIXED + (size_t)h.nx + (size_t)h.ny + NTEXT(r->version) + 1 ||
      strcmp(h.columns[0], "key") != 0) {
    rc = bk_error_set(err, BK_ECORRUPT, r->path, lineno, 0,
                      "the column line does not match the '# inputs' and "
                      "'# outputs' lines; move the log aside to start "
                      "again");
    goto done;
  }
  if (!o->any_study && (rc = header_compare(&h, o, err)))
    goto done;

  /* Keep what the header says. */
  r->nx = (size_t)h.nx;
  r->ny = (size_t)h.ny;
  r->xnames = bk_calloc(r->nx, sizeof *r->xnames);
  r->ynames = bk_calloc(r->ny, sizeof *r->ynames);
  if (!r->xnames || !r->ynames) {
    rc = BK_ENOMEM;
    goto done;
  }
  for (size_t i = 0; i < r->nx; i++) {
    r->xnames[i] = h.columns[NFIXED + i];
    h.columns[NFIXED + i] = NULL;
  }
  for (size_t i = 0; i < r->ny; i++) {
    r->ynames[i] = h.columns[NFIXED + r->nx + i];
    h.columns[NFIXED + r->nx + i] = NULL;
  }
  r->parts = h.parts;
  r->nparts = h.nparts;
  r->tool = h.tool;
  r->created = h.created;
  h.parts = NULL;
  h.nparts = 0;
  h.tool = h.created = NULL;
  if ((rc = parsed_init(&r->found, r->nx, r->ny)) ||
      (rc = parsed_init(&r->scanned, r->nx, r->ny)))
    goto done;

  /* The records. A line that fails its check is dropped when it is the
   * last line; before the last it is damage we refuse. */
  size_t want_tabs = NFIXED + r->nx + r->ny + NTEXT(r->version) - 1;
  const char *bad = NULL;
  int bad_line = 0;
  uint64_t bad_off = 0;
  if ((rc = index_reserve(r)))
    goto done;
  r->offs[0] = off + n + 1;
  for (;;) {
    rc = reader_next(&rd, &line, &n, &off);
    if (rc < 0)
      goto read_error;
    if (rc == 0)
      break;
    lineno++;
    if (bad) {
      rc = corrupt(err, r->path, bad_line, bad);
      goto done;
    }
    const char *why = check_line(line, n, want_tabs);
    if (why) {
      bad = why;
      bad_line = lineno;
      bad_off = off;
      continue;
    }
    if ((rc = index_reserve(r)))
      goto done;
    r->offs[r->nlines + 1] = off + n;
    const char *tab = memchr(line, '\t', n);
    if ((rc = index_add(r, line, (size_t)(tab - line))))
      goto done;
  }
  if (bad)
    r->dropped = (size_t)(rd.off + rd.len - bad_off);
  rc = 0;
  goto done;
read_error:
  rc = bk_error_set(err, rc, NULL, 0, 0, "cannot read records from %s: %s",
                    r->path, bk_strerror(rc));
done:
  reader_close(&rd);
  header_close(&h);
  return rc;
}

/* Creates the folders above path that are missing, noting them in
 * made[] (shallowest first) so that a failed open can remove them. */
static int make_parents(const char *path, char **made, int *nmade,
                        bk_error_t *err) {
  char *dir = bk_strdup(path);
  if (!dir)
    return BK_ENOMEM;
  int rc = 0;
  for (char *p = dir + 1; *p; p++) {
    if (*p != '/')
      continue;
    *p = '\0';
    if (mkdir(dir, 0777) == 0) {
      if (*nmade < MAX_DIRS && (made[*nmade] = bk_strdup(dir)))
        (*nmade)++;
    } else if (errno != EEXIST) {
      rc =
          bk_error_set(err, -errno, NULL, 0, 0,
                       "cannot create the folder %s: %s", dir, strerror(errno));
      break;
    }
    *p = '/';
  }
  bk_free(dir);
  return rc;
}

/* Reads the lock file into buf; returns its length or -errno. */
static ssize_t read_lock(const char *path, char *buf, size_t cap) {
  int fd = open(path, O_RDONLY | O_CLOEXEC);
  if (fd < 0)
    return -errno;
  ssize_t k = pread_all(fd, buf, cap - 1, 0);
  close(fd);
  if (k >= 0)
    buf[k] = '\0';
  return k;
}

/* Takes the lock: creates path.lock exclusively holding "host:pid\n". A
 * lock naming this host and a process that no longer exists is taken
 * over. Two processes taking over the same stale lock at the same moment
 * could both succeed; that needs two starts within microseconds after a
 * crash, and is accepted. */
static int take_lock(bk_records_t *r, bk_error_t *err) {
  char host[256] = "";
  if (gethostname(host, sizeof host - 1) != 0 || !host[0])
    snprintf(host, sizeof host, "unknown");
  char text[LOCK_TEXT_MAX];
  snprintf(text, sizeof text, "%s:%ld\n", host, (long)getpid());
  for (int attempt = 0; attempt < 5; attempt++) {
    int fd = open(r->lock_path, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0644);
    if (fd >= 0) {
      size_t n = strlen(text);
      ssize_t k;
      do
        k = write(fd, text, n);
      while (k < 0 && errno == EINTR);
      int e = k == (ssize_t)n ? 0 : k < 0 ? errno : EIO;
      if (close(fd) != 0 && !e)
        e = errno;
      if (e) {
        unlink(r->lock_path);
        return bk_error_set(err, -e, NULL, 0, 0,
                            "cannot write the lock file %s: %s", r->lock_path,
                            strerror(e));
      }
      r->lock_text = bk_strdup(text);
      if (!r->lock_text) {
        unlink(r->lock_path);
        return BK_ENOMEM;
      }
      return 0;
    }
    if (errno != EEXIST)
      return bk_error_set(err, -errno, NULL, 0, 0,
                          "cannot create the lock file %s: %s", r->lock_path,
                          strerror(errno));
    char held[LOCK_TEXT_MAX];
    ssize_t k = read_lock(r->lock_path, held, sizeof held);
    if (k == -ENOENT)
      continue; /* released meanwhile */
    char *colon = k > 0 ? strrchr(held, ':') : NULL;
    char *end = NULL;
    long pid = colon ? strtol(colon + 1, &end, 10) : 0;
    if (!colon || pid <= 0 || (*end && *end != '\n'))
      return bk_error_set(err, BK_ELOCKED, NULL, 0, 0,
                          "%s is locked by %s, which names no brink process; "
                          "if no brink is using it, remove %s",
                          r->path, r->lock_path, r->lock_path);
    *colon = '\0';
    if (strcmp(held, host) == 0 && kill((pid_t)pid, 0) != 0 && errno == ESRCH) {
      if (unlink(r->lock_path) != 0 && errno != ENOENT)
        return bk_error_set(err, -errno, NULL, 0, 0,
                            "cannot remove the stale lock file %s: %s",
                            r->lock_path, strerror(errno));
      continue;
    }
    return bk_error_set(err, BK_ELOCKED, NULL, 0, 0,
                        "%s is in use by brink on %s (pid %ld); wait for it "
                        "to finish or stop it (if that process is gone, "
                        "remove %s)",
                        r->path, held, pid, r->lock_path);
  }
  return bk_error_set(err, BK_ELOCKED, NULL, 0, 0,
                      "%s is in use: its lock %s keeps changing", r->path,
                      r->lock_path);
}

/* Removes the lock if it is still ours. */
static void release_lock(bk_records_t *r) {
  if (!r->lock_text)
    return;
  char held[LOCK_TEXT_MAX];
  if (read_lock(r->lock_path, held, sizeof held) >= 0 &&
      strcmp(held, r->lock_text) == 0)
    unlink(r->lock_path);
  bk_free(r->lock_text);
  r->lock_text = NULL;
}

/* Writes a new log holding only the header: to path.new, synced, then
 * renamed over path, so that a log on disk always has a whole header. */
static int create_log(bk_records_t *r, const bk_records_opts_t *o,
                      bk_error_t *err) {
  bk_buf_t b;
  bk_buf_init(&b);
  size_t n = strlen(r->path);
  char *tmp = bk_malloc(n + 5);
  int rc = tmp ? put_header(&b, o) : BK_ENOMEM;
  if (rc)
    goto done;
  memcpy(tmp, r->path, n);
  memcpy(tmp + n, ".new", 5);
  int fd = open(tmp, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd < 0) {
    rc = -errno;
    goto failed;
  }
  rc = write_all(fd, b.data, b.len);
  if (!rc && fdatasync(fd) != 0)
    rc = -errno;
  if (close(fd) != 0 && !rc)
    rc = -errno;
  if (!rc && rename(tmp, r->path) != 0)
    rc = -errno;
  if (rc) {
    unlink(tmp);
    goto failed;
  }
  fsync_dir_of(r->path);
  goto done;
failed:
  bk_error_set(err, rc, NULL, 0, 0, "cannot create %s: %s", r->path,
               strerror(-rc));
done:
  bk_free(tmp);
  bk_buf_close(&b);
  return rc;
}

static int check_opts(const bk_records_opts_t *o, bk_error_t *err) {
  if (!o || !o->path || !o->path[0])
    return bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                        "records: no path for the log");
  if (o->any_study && !o->read_only)
    return bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                        "records: any_study needs read_only");
  if (o->any_study)
    return 0;
  if ((o->nparts && !o->parts) || (o->nx && !o->xnames) ||
      (o->ny && !o->ynames))
    return bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                        "records: missing names for %s", o->path);
  for (size_t i = 0; i < o->nparts; i++) {
    const char *d = o->parts[i].digest;
    if (!o->parts[i].name || !o->parts[i].name[0] || !d || !d[0] ||
        strpbrk(d, " \t\r\n#"))
      return bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                          "records: fingerprint part %zu has no name or a "
                          "digest with blanks",
                          i + 1);
  }
  for (size_t i = 0; i < o->nx; i++)
    if (!o->xnames[i])
      return bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                          "records: input %zu has no name", i + 1);
  for (size_t i = 0; i < o->ny; i++)
    if (!o->ynames[i])
      return bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                          "records: output %zu has no name", i + 1);
  return 0;
}

static void records_free(bk_records_t *r) {
  if (!r)
    return;
  bk_free(r->path);
  bk_free(r->lock_path);
  bk_free(r->lock_text);
  free_names(r->xnames, r->nx);
  free_names(r->ynames, r->ny);
  for (size_t i = 0; i < r->nparts; i++) {
    bk_free((char *)r->parts[i].name);
    bk_free((char *)r->parts[i].digest);
  }
  bk_free(r->parts);
  bk_free(r->tool);
  bk_free(r->created);
  bk_free(r->offs);
  bk_free(r->dead);
  bk_free(r->slots);
  bk_buf_close(&r->wbuf);
  bk_buf_close(&r->kbuf);
  bk_buf_close(&r->sbuf);
  parsed_close(&r->found);
  parsed_close(&r->scanned);
  bk_free(r);
}

int bk_records_open(bk_records_t **out, const bk_records_opts_t *opts,
                    bk_error_t *err) {
  *out = NULL;
  int rc = check_opts(opts, err);
  if (rc)
    return rc;
  bk_records_t *r = bk_calloc(1, sizeof *r);
  if (!r)
    return BK_ENOMEM;
  char *made[MAX_DIRS];
  int nmade = 0, created = 0;
  r->fd = -1;
  r->read_only = opts->read_only;
  r->sync_interval = opts->sync_interval == 0 ? 1.0 : opts->sync_interval;
  r->last_sync = -INFINITY;
  size_t n = strlen(opts->path);
  r->path = bk_strdup(opts->path);
  r->lock_path = bk_malloc(n + 6);
  if (!r->path || !r->lock_path) {
    rc = BK_ENOMEM;
    goto fail;
  }
  memcpy(r->lock_path, opts->path, n);
  memcpy(r->lock_path + n, ".lock", 6);

  if (!r->read_only) {
    if ((rc = make_parents(r->path, made, &nmade, err)) ||
        (rc = take_lock(r, err)))
      goto fail;
  }
  int flags = (r->read_only ? O_RDONLY : O_RDWR | O_APPEND) | O_CLOEXEC;
  r->fd = open(r->path, flags);
  struct stat st;
  if (r->fd >= 0 && fstat(r->fd, &st) == 0 && st.st_size == 0) {
    /* An empty file has no header yet: treat it as absent. */
    close(r->fd);
    r->fd = -1;
    errno = ENOENT;
  }
  if (r->fd < 0 && errno == ENOENT && r->read_only) {
    rc = bk_error_set(err, BK_ENOTFOUND, NULL, 0, 0, "no records in %s yet",
                      r->path);
    goto fail;
  }
  if (r->fd < 0 && errno == ENOENT) {
    if ((rc = create_log(r, opts, err)))
      goto fail;
    created = 1;
    r->fd = open(r->path, flags);
  }
  if (r->fd < 0) {
    rc = bk_error_set(err, -errno, NULL, 0, 0, "cannot open %s: %s", r->path,
                      strerror(errno));
    goto fail;
  }
  if ((rc = load(r, opts, err)))
    goto fail;
  if (r->dropped && !r->read_only) {
    if (ftruncate(r->fd, (off_t)r->offs[r->nlines]) != 0 ||
        fdatasync(r->fd) != 0) {
      rc = bk_error_set(err, -errno, NULL, 0, 0,
                        "cannot drop the torn last line of %s: %s", r->path,
                        strerror(errno));
      goto fail;
    }
  }
  for (int i = 0; i < nmade; i++)
    bk_free(made[i]);
  *out = r;
  return 0;

fail:
  if (r->fd >= 0)
    close(r->fd);
  if (created)
    unlink(r->path);
  release_lock(r);
  for (int i = nmade - 1; i >= 0; i--) {
    rmdir(made[i]);
    bk_free(made[i]);
  }
  records_free(r);
  return rc;
}

int bk_records_sync(bk_records_t *r) {
  if (!r || r->read_only || !r->dirty)
    return 0;
  if (fdatasync(r->fd) != 0)
    return -errno;
  r->dirty = 0;
  r->last_sync = now_seconds();
  return 0;
}

int bk_records_close(bk_records_t *r) {
  if (!r)
    return 0;
  int rc = bk_records_sync(r);
  if (r->fd >= 0 && close(r->fd) != 0 && !rc)
    rc = -errno;
  release_lock(r);
  records_free(r);
  return rc;
}

/* ---- Lookups and appends ---------------------------------------------- */

int bk_records_find(bk_records_t *r, const char *key, bk_record_t *rec) {
  if (!r || !key_is_valid(key))
    return 0;
  size_t n = strlen(key);
  uint32_t h = hash_key(key, n);
  size_t at;
  if (index_probe(r, key, n, h, &at) != 1)
    return 0;
  size_t idx = r->slots[at].line - 1;
  size_t len = (size_t)(r->offs[idx + 1] - r->offs[idx]);
  bk_buf_reset(&r->kbuf);
  if (bk_buf_reserve(&r->kbuf, len))
    return 0;
  ssize_t k = pread_all(r->fd, r->kbuf.data, len, r->offs[idx]);
  if (k != (ssize_t)len || parse_line(r, &r->found, r->kbuf.data, len))
    return 0;
  *rec = r->found.rec;
  return 1;
}

int bk_records_append(bk_records_t *r, const bk_record_t *rec,
                      bk_error_t *err) {
  if (r->read_only)
    return bk_error_set(err, BK_EINVAL, NULL, 0, 0, "%s was opened read-only",
                        r->path);
  if (r->broken)
    return bk_error_set(err, r->broken, NULL, 0, 0,
                        "cannot write records to %s: an earlier write "
                        "failed (%s)",
                        r->path, bk_strerror(r->broken));
  if (rec->nx != r->nx || rec->ny != r->ny)
    return bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                        "record %s has %zu inputs and %zu outputs; %s has "
                        "%zu and %zu",
                        rec->key ? rec->key : "(null)", rec->nx, rec->ny,
                        r->path, r->nx, r->ny);
  bk_buf_reset(&r->wbuf);
  int rc = encode_into(&r->wbuf, rec, r->version);
  if (rc == BK_EINVAL)
    return bk_error_set(err, rc, NULL, 0, 0,
                        "cannot record '%s': a key must be non-empty "
                        "without blanks, control characters or '#', with "
                        "a known status and attempts >= 0",
                        rec->key ? rec->key : "(null)");
  if (rc || (rc = index_reserve(r)))
    return bk_error_set(err, rc, NULL, 0, 0, "cannot record %s: %s", rec->key,
                        bk_strerror(rc));

  uint64_t end = r->offs[r->nlines];
  rc = write_all(r->fd, r->wbuf.data, r->wbuf.len);
  if (rc) {
    /* Cut a partial line away so the log still ends on a whole line; if
     * even that fails, refuse further appends (a torn line followed by
     * more lines could not be resumed). */
    if (ftruncate(r->fd, (off_t)end) != 0)
      r->broken = rc;
    if (rc == -ENOSPC || rc == -EDQUOT) {
      bk_error_set(err, BK_ENOSPC, NULL, 0, 0, "cannot write records to %s: %s",
                   r->path, strerror(-rc));
      return BK_ENOSPC;
    }
    return bk_error_set(err, rc, NULL, 0, 0, "cannot write records to %s: %s",
                        r->path, strerror(-rc));
  }
  r->offs[r->nlines + 1] = end + r->wbuf.len;
  /* The key was written as the first field, up to the first TAB. */
  index_add(r, rec->key, strlen(rec->key));
  r->dirty = 1;
  if (now_seconds() - r->last_sync >= r->sync_interval &&
      (rc = bk_records_sync(r))) {
    r->broken = rc;
    return bk_error_set(err, rc, NULL, 0, 0, "cannot write records to %s: %s",
                        r->path, strerror(-rc));
  }
  return 0;
}

size_t bk_records_count(const bk_records_t *r) {
  return r ? r->count : 0;
}

size_t bk_records_dropped(const bk_records_t *r) {
  return r ? r->dropped : 0;
}

/* Reads forward through the log in chunks, so a scan costs a few system
 * calls per megabyte rather than one per line. */
int bk_records_scan(bk_records_t *r, bk_records_cb cb, void *data) {
  size_t nlines = r->nlines;
  bk_buf_reset(&r->sbuf);
  r->sbuf_off = 0;
  for (size_t i = 0; i < nlines; i++) {
    if (r->dead[i / 8] & (1u << (i % 8)))
      continue;
    uint64_t from = r->offs[i], to = r->offs[i + 1];
    if (from < r->sbuf_off || to > r->sbuf_off + r->sbuf.len) {
      uint64_t want = r->offs[nlines] - from;
      if (want > READ_CHUNK)
        want = READ_CHUNK;
      if (want < to - from)
        want = to - from;
      bk_buf_reset(&r->sbuf);
      if (bk_buf_reserve(&r->sbuf, (size_t)want))
        return BK_ENOMEM;
      ssize_t k = pread_all(r->fd, r->sbuf.data, (size_t)want, from);
      if (k < 0)
        return (int)k;
      r->sbuf.len = (size_t)k;
      r->sbuf_off = from;
      if ((uint64_t)k < to - from)
        return BK_EIO;
    }
    const char *line = r->sbuf.data + (from - r->sbuf_off);
    if (parse_line(r, &r->scanned, line, (size_t)(to - from)))
      return BK_ECORRUPT;
    int stop = cb(data, &r->scanned.rec);
    if (stop)
      return stop;
  }
  return 0;
}

/* ---- Header accessors -------------------------------------------------- */

void bk_records_columns(const bk_records_t *r, size_t *nx,
                        const char *const **xnames, size_t *ny,
                        const char *const **ynames) {
  if (nx)
    *nx = r->nx;
  if (xnames)
    *xnames = (const char *const *)r->xnames;
  if (ny)
    *ny = r->ny;
  if (ynames)
    *ynames = (const char *const *)r->ynames;
}

const bk_fingerprint_part_t *bk_records_parts(const bk_records_t *r,
                                              size_t *nparts) {
  *nparts = r->nparts;
  return r->parts;
}

int bk_records_version(const bk_records_t *r) {
  return r->version;
}

const char *bk_records_tool(const bk_records_t *r) {
  return r->tool ? r->tool : "";
}

const char *bk_records_created(const bk_records_t *r) {
  return r->created ? r->created : "";
}

int bk_records_open_folder(bk_records_t **out, const char *folder,
                           bk_error_t *err) {
  bk_buf_t p;
  bk_buf_init(&p);
  if (bk_buf_printf(&p, "%s/records.log", folder) != 0) {
    *out = NULL;
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  }
  bk_records_opts_t ro = {.path = p.data, .read_only = 1, .any_study = 1};
  int rc = bk_records_open(out, &ro, err);
  bk_buf_close(&p);
  return rc;
}
