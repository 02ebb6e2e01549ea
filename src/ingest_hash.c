/* SPDX-License-Identifier: MIT
 * The SHA-256 of an imported file, worked out on a thread of its own so the
 * checksum a measurement run keeps does not lengthen the import. A regular
 * file is read by the hasher itself, from the import's own open file, from
 * the moment the import starts: it needs nothing from the parser and uses
 * what idle time the machine has. It checks at the end that the file did not
 * change meanwhile, so the digest is of what was parsed. A pipe (standard
 * input) can be read once only: there each block the CSV reader reads is
 * copied into a ring of buffers and hashed from there. Private to the ingest
 * module.
 */
#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "ingest_internal.h"

/* Buffers in a ring between the reader and the hasher (a pipe): the hasher
 * may fall this many pieces behind before the reader waits for it. */
#define HASH_BUFFERS 16
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
    int read_errno;          /* the hasher's read failure, 0 if none */
    unsigned char *block;
    /* a pipe: the ring */
    unsigned char *buf[HASH_BUFFERS];
    size_t cap[HASH_BUFFERS], len[HASH_BUFFERS];
    int full[HASH_BUFFERS];  /* guarded by lock: a block waits to be hashed */
    int fill, hash;          /* the next buffer to fill (reader), to hash (hasher) */
};

static int quitting(ingest_hasher *h)
{
    pthread_mutex_lock(&h->lock);
    int quit = h->quit;
    pthread_mutex_unlock(&h->lock);
    return quit;
}

/* A regular file from its first byte to its end, whatever the parser has
 * read of it so far (pread leaves the stream's position alone). */
static void *file_hasher_main(void *arg)
{
    ingest_hasher *h = arg;
    for (off_t at = 0; !quitting(h);) {
        ssize_t got = pread(h->fd, h->block, HASH_PIECE_BYTES, at);
        if (got < 0 && errno == EINTR)
            continue;
        if (got < 0)
            h->read_errno = errno;
        if (got <= 0)
            break;
        sl__sha256_update(&h->sha, h->block, (size_t)got);
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
    free(h->block);
    for (int i = 0; i < HASH_BUFFERS; i++)
        free(h->buf[i]);
    pthread_cond_destroy(&h->changed);
    pthread_mutex_destroy(&h->lock);
    free(h);
}

static ingest_hasher *hasher_start(int fd, void *(*main_fn)(void *))
{
    ingest_hasher *h = calloc(1, sizeof *h);
    if (!h)
        return NULL;
    h->fd = fd;
    sl__sha256_init(&h->sha);
    pthread_mutex_init(&h->lock, NULL);
    pthread_cond_init(&h->changed, NULL);
    if ((fd >= 0 && !(h->block = malloc(HASH_PIECE_BYTES))) ||
        (fd >= 0 && fstat(fd, &h->at_start) != 0) ||
        pthread_create(&h->thread, NULL, main_fn, h) != 0) {
        hasher_release(h);
        return NULL;
    }
    return h;
}

ingest_hasher *sl__ingest_hasher_new(void)
{
    return hasher_start(-1, ring_hasher_main);
}

ingest_hasher *sl__ingest_hasher_of_file(int fd)
{
    struct stat st;
    if (fd < 0 || fstat(fd, &st) != 0 || !S_ISREG(st.st_mode))
        return NULL;
    return hasher_start(fd, file_hasher_main);
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

sl_hash_result sl__ingest_hasher_finish(ingest_hasher *h, char hex[65])
{
    /* a file hasher reads to the end unless told to quit */
    if (h->fd >= 0)
        pthread_join(h->thread, NULL);
    else
        stop(h);
    sl_hash_result r = SL_HASH_OK;
    if (h->fd >= 0 && h->read_errno)
        r = SL_HASH_READ_FAILED;
    else if (h->fd >= 0 && !file_unchanged(h))
        r = SL_HASH_FILE_CHANGED;
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
