/* SPDX-License-Identifier: MIT
 * The SHA-256 of an imported file, worked out on a thread of its own so the
 * checksum a measurement run keeps does not lengthen the import. A regular
 * file is read by the hasher itself, from the import's own open file, from
 * the moment the import starts, into a ring of blocks: it hashes each block
 * and the parser reads the same blocks (sl__ingest_hasher_stream, where the
 * C library can make a stream of them), so the file crosses from the kernel
 * once. It checks at the end that the file did not change meanwhile. A pipe
 * (standard input) can be read once only: there each block the CSV reader
 * reads is copied into the ring and hashed from there. Private to the ingest
 * module.
 */
#if defined(__linux__)
#define _GNU_SOURCE 1 /* fopencookie */
#endif
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "ingest_internal.h"

/* Blocks in the ring: a pipe's hasher may fall this many behind before the
 * reader waits for it, a file's hasher read this many ahead of the parser
 * (1 MiB: as fast as 2 MiB, the import's peak no higher than the release's). */
#define HASH_BUFFERS 8
/* Blocks are handed over in pieces of at most this many bytes, so the
 * buffers stay small whatever the reader's block size; a regular file is
 * read in blocks of this size too. */
#define HASH_PIECE_BYTES ((size_t)128 * 1024)

struct ingest_hasher {
    pthread_t thread;
    pthread_mutex_t lock;
    pthread_cond_t changed;
    sha256_ctx sha;
    int quit;                /* guarded by lock */
    /* a regular file, read by the hasher */
    int fd;                  /* -1 for a pipe */
    struct stat at_start;
    int read_errno;          /* guarded by lock: the hasher's read failure, 0 if none */
    int at_end;              /* guarded by lock: the file hasher read it all */
    int streaming;           /* guarded by lock: a file's blocks wait for the stream */
    size_t taken;            /* the stream's bytes taken from its current block */
    /* the ring: a pipe's blocks as the reader hands them over, or a file's
     * as the hasher reads them */
    unsigned char *buf[HASH_BUFFERS];
    size_t cap[HASH_BUFFERS], len[HASH_BUFFERS];
    int full[HASH_BUFFERS];  /* guarded by lock: a block holds bytes not yet used */
    int fill, hash;          /* the next buffer to fill, to use (hash or stream) */
};

/* A regular file from its first byte to its end, whatever the parser has
 * read of it so far (pread leaves the stream's position alone), into the
 * ring: each block is handed on, then hashed (both only read it), and is
 * filled again once the stream has used it. Without a stream, the hasher
 * only hashes: every block is free again at once. */
static void *file_hasher_main(void *arg)
{
    ingest_hasher *h = arg;
    off_t at = 0;
    for (int i = 0;; i = (i + 1) % HASH_BUFFERS) {
        pthread_mutex_lock(&h->lock);
        while (h->full[i] && !h->quit)
            pthread_cond_wait(&h->changed, &h->lock);
        int quit = h->quit;
        pthread_mutex_unlock(&h->lock);
        if (quit)
            break;
        ssize_t got;
        do
            got = pread(h->fd, h->buf[i], HASH_PIECE_BYTES, at);
        while (got < 0 && errno == EINTR);
        pthread_mutex_lock(&h->lock);
        if (got <= 0) {
            h->read_errno = got < 0 ? errno : 0;
            h->at_end = 1;
            pthread_cond_broadcast(&h->changed);
            pthread_mutex_unlock(&h->lock);
            break;
        }
        h->len[i] = (size_t)got;
        h->full[i] = h->streaming;
        pthread_cond_broadcast(&h->changed);
        pthread_mutex_unlock(&h->lock);
        sl__sha256_update(&h->sha, h->buf[i], (size_t)got);
        at += got;
    }
    return NULL;
}

static void *ring_hasher_main(void *arg)
{
    ingest_hasher *h = arg;
    pthread_mutex_lock(&h->lock);
    for (;;) {
        while (!h->full[h->hash] && !h->quit)
            pthread_cond_wait(&h->changed, &h->lock);
        if (!h->full[h->hash])
            break; /* quit, and every block hashed */
        int i = h->hash;
        pthread_mutex_unlock(&h->lock);
        sl__sha256_update(&h->sha, h->buf[i], h->len[i]);
        pthread_mutex_lock(&h->lock);
        h->full[i] = 0;
        h->hash = (i + 1) % HASH_BUFFERS;
        pthread_cond_broadcast(&h->changed);
    }
    pthread_mutex_unlock(&h->lock);
    return NULL;
}

static void hasher_release(ingest_hasher *h)
{
    for (int i = 0; i < HASH_BUFFERS; i++)
        free(h->buf[i]);
    pthread_cond_destroy(&h->changed);
    pthread_mutex_destroy(&h->lock);
    free(h);
}

/* The ring's blocks of a file hasher, made before its thread starts. */
static int make_blocks(ingest_hasher *h)
{
    for (int i = 0; i < HASH_BUFFERS; i++) {
        if (!(h->buf[i] = malloc(HASH_PIECE_BYTES)))
            return -1;
        h->cap[i] = HASH_PIECE_BYTES;
    }
    return 0;
}

static ingest_hasher *hasher_start(int fd, bool streaming, void *(*main_fn)(void *))
{
    ingest_hasher *h = calloc(1, sizeof *h);
    if (!h)
        return NULL;
    h->fd = fd;
    h->streaming = streaming;
    sl__sha256_init(&h->sha);
    pthread_mutex_init(&h->lock, NULL);
    pthread_cond_init(&h->changed, NULL);
    if ((fd >= 0 && make_blocks(h) != 0) || (fd >= 0 && fstat(fd, &h->at_start) != 0) ||
        pthread_create(&h->thread, NULL, main_fn, h) != 0) {
        hasher_release(h);
        return NULL;
    }
    return h;
}

ingest_hasher *sl__ingest_hasher_new(void)
{
    return hasher_start(-1, false, ring_hasher_main);
}

/* Where the C library makes a stream of a read function (glibc), the
 * parser reads the hasher's blocks; elsewhere it reads the file itself. */
#if defined(__GLIBC__)
#define HASHER_STREAMS true
#else
#define HASHER_STREAMS false
#endif

ingest_hasher *sl__ingest_hasher_of_file(int fd)
{
    struct stat st;
    if (fd < 0 || fstat(fd, &st) != 0 || !S_ISREG(st.st_mode))
        return NULL;
    return hasher_start(fd, HASHER_STREAMS, file_hasher_main);
}

/* Blocks no longer wait for a stream: every block read is free again. */
static void stop_streaming(ingest_hasher *h)
{
    pthread_mutex_lock(&h->lock);
    h->streaming = 0;
    for (int i = 0; i < HASH_BUFFERS; i++)
        h->full[i] = 0;
    pthread_cond_broadcast(&h->changed);
    pthread_mutex_unlock(&h->lock);
}

#if defined(__GLIBC__)
/* The stream's read: the next bytes of the ring's current block, once the
 * hasher has read it; 0 at the end of the file. */
static ssize_t stream_read(void *cookie, char *out, size_t n)
{
    ingest_hasher *h = cookie;
    int i = h->hash;
    pthread_mutex_lock(&h->lock);
    while (!h->full[i] && !h->at_end)
        pthread_cond_wait(&h->changed, &h->lock);
    int full = h->full[i], failed = h->read_errno;
    pthread_mutex_unlock(&h->lock);
    if (!full) {
        errno = failed;
        return failed ? -1 : 0;
    }
    size_t left = h->len[i] - h->taken, k = n < left ? n : left;
    memcpy(out, h->buf[i] + h->taken, k);
    h->taken += k;
    if (h->taken == h->len[i]) {
        h->taken = 0;
        h->hash = (i + 1) % HASH_BUFFERS;
        pthread_mutex_lock(&h->lock);
        h->full[i] = 0;
        pthread_cond_broadcast(&h->changed);
        pthread_mutex_unlock(&h->lock);
    }
    return (ssize_t)k;
}
#endif

FILE *sl__ingest_hasher_stream(ingest_hasher *h)
{
    FILE *f = NULL;
#if defined(__GLIBC__)
    if (h->fd >= 0 && h->streaming) {
        cookie_io_functions_t io = { .read = stream_read };
        f = fopencookie(h, "r", io); /* large reads go straight to stream_read */
    }
#endif
    if (!f && h->fd >= 0)
        stop_streaming(h);
    return f;
}

bool sl__ingest_hasher_taps(const ingest_hasher *h) { return h->fd < 0; }

static int add_piece(ingest_hasher *h, const char *bytes, size_t n);

int sl__ingest_hasher_add(ingest_hasher *h, const char *bytes, size_t n)
{
    for (size_t at = 0; at < n; at += HASH_PIECE_BYTES)
        if (add_piece(h, bytes + at, n - at < HASH_PIECE_BYTES ? n - at : HASH_PIECE_BYTES) != 0)
            return -1;
    return 0;
}

static int add_piece(ingest_hasher *h, const char *bytes, size_t n)
{
    int i = h->fill;
    pthread_mutex_lock(&h->lock);
    while (h->full[i])
        pthread_cond_wait(&h->changed, &h->lock);
    pthread_mutex_unlock(&h->lock);
    if (n > h->cap[i]) { /* the hasher never touches a buffer that is not full */
        unsigned char *grown = realloc(h->buf[i], n);
        if (!grown)
            return -1;
        h->buf[i] = grown;
        h->cap[i] = n;
    }
    memcpy(h->buf[i], bytes, n);
    h->len[i] = n;
    pthread_mutex_lock(&h->lock);
    h->full[i] = 1;
    pthread_cond_broadcast(&h->changed);
    pthread_mutex_unlock(&h->lock);
    h->fill = (i + 1) % HASH_BUFFERS;
    return 0;
}

/* The file as it is now against the file when the hasher started. */
static bool file_unchanged(const ingest_hasher *h)
{
    struct stat now;
    const struct stat *then = &h->at_start;
    return fstat(h->fd, &now) == 0 && now.st_size == then->st_size &&
           now.st_ino == then->st_ino && now.st_mtim.tv_sec == then->st_mtim.tv_sec &&
           now.st_mtim.tv_nsec == then->st_mtim.tv_nsec;
}

static void stop(ingest_hasher *h)
{
    pthread_mutex_lock(&h->lock);
    h->quit = 1;
    pthread_cond_broadcast(&h->changed);
    pthread_mutex_unlock(&h->lock);
    pthread_join(h->thread, NULL);
}

ingest_hash_result sl__ingest_hasher_finish(ingest_hasher *h, char hex[65])
{
    /* a file hasher reads to the end unless told to quit; what no stream
     * took is hashed all the same */
    if (h->fd >= 0) {
        stop_streaming(h);
        pthread_join(h->thread, NULL);
    }
    else
        stop(h);
    ingest_hash_result r = INGEST_HASH_OK;
    if (h->fd >= 0 && h->read_errno)
        r = INGEST_HASH_READ_FAILED;
    else if (h->fd >= 0 && !file_unchanged(h))
        r = INGEST_HASH_FILE_CHANGED;
    unsigned char digest[32];
    sl__sha256_final(&h->sha, digest);
    sl__sha256_hex(digest, hex);
    hasher_release(h);
    return r;
}

void sl__ingest_hasher_free(ingest_hasher *h)
{
    if (!h)
        return;
    stop(h);
    hasher_release(h);
}
