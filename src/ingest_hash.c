/* SPDX-License-Identifier: MIT
 * The SHA-256 of an imported file, worked out on a thread of its own while
 * the reading thread parses: each block the CSV reader reads is copied into
 * a ring of buffers and hashed there, so the checksum a measurement run
 * keeps does not lengthen the read. Private to the ingest module.
 */
#include <stdlib.h>
#include <string.h>

#include "ingest_internal.h"

/* Buffers in a ring between the reader and the hasher: the hasher may fall
 * this many pieces behind (while the fitting threads have the cores) before
 * the reader waits for it. */
#define HASH_BUFFERS 16

struct ingest_hasher {
    pthread_t thread;
    pthread_mutex_t lock;
    pthread_cond_t changed;
    unsigned char *buf[HASH_BUFFERS];
    size_t cap[HASH_BUFFERS], len[HASH_BUFFERS];
    int full[HASH_BUFFERS];  /* guarded by lock: a block waits to be hashed */
    int fill, hash;          /* the next buffer to fill (reader), to hash (hasher) */
    int quit;
    sha256_ctx sha;
};

static void *hasher_main(void *arg)
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

ingest_hasher *sl__ingest_hasher_new(void)
{
    ingest_hasher *h = calloc(1, sizeof *h);
    if (!h)
        return NULL;
    sl__sha256_init(&h->sha);
    pthread_mutex_init(&h->lock, NULL);
    pthread_cond_init(&h->changed, NULL);
    if (pthread_create(&h->thread, NULL, hasher_main, h) != 0) {
        pthread_cond_destroy(&h->changed);
        pthread_mutex_destroy(&h->lock);
        free(h);
        return NULL;
    }
    return h;
}

/* Blocks are handed over in pieces of at most this many bytes, so the
 * buffers stay small whatever the reader's block size. */
#define HASH_PIECE_BYTES ((size_t)256 * 1024)

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

void sl__ingest_hasher_free(ingest_hasher *h, char hex[65])
{
    if (!h)
        return;
    pthread_mutex_lock(&h->lock);
    h->quit = 1;
    pthread_cond_broadcast(&h->changed);
    pthread_mutex_unlock(&h->lock);
    pthread_join(h->thread, NULL);
    if (hex) {
        unsigned char digest[32];
        sl__sha256_final(&h->sha, digest);
        sl__sha256_hex(digest, hex);
    }
    for (int i = 0; i < HASH_BUFFERS; i++)
        free(h->buf[i]);
    pthread_cond_destroy(&h->changed);
    pthread_mutex_destroy(&h->lock);
    free(h);
}
