/* SPDX-License-Identifier: MIT
 * SHA-256 (FIPS 180-4) of a stream of bytes, for the checksum a measurement
 * run keeps of its file. Private to the library: not a general crypto API.
 * Uses the x86 SHA extensions where the processor has them, else portable C;
 * both give the same digest.
 */
#ifndef SL_SHA256_H
#define SL_SHA256_H

#include <stddef.h>
#include <stdint.h>

typedef struct {
    uint32_t h[8];
    uint64_t bytes;             /* message length so far */
    unsigned char block[64];    /* a partial block */
    size_t fill;
    int use_extensions;         /* the x86 SHA instructions */
} sha256_ctx;

/* Start a digest; sl__sha256_init_portable never uses the processor's SHA
 * instructions (so the tests can check both ways). */
void sl__sha256_init(sha256_ctx *ctx);
void sl__sha256_init_portable(sha256_ctx *ctx);
/* 1 when sl__sha256_init uses the processor's SHA instructions. */
int sl__sha256_has_extensions(void);
void sl__sha256_update(sha256_ctx *ctx, const void *data, size_t n);
/* The digest, then its 64 lower-case hex digits and a NUL. */
void sl__sha256_final(sha256_ctx *ctx, unsigned char digest[32]);
void sl__sha256_hex(const unsigned char digest[32], char hex[65]);

#endif
