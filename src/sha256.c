/* SPDX-License-Identifier: MIT
 * SHA-256 as specified in FIPS 180-4 (Secure Hash Standard, NIST, 2015),
 * sections 4.1.2 (functions), 4.2.2 (constants), 5.1.1 (padding), 5.3.3
 * (initial hash value) and 6.2.2 (computation); and the same compression on
 * the x86 SHA extensions (SHA256RNDS2, SHA256MSG1, SHA256MSG2), chosen at run
 * time by CPUID. Checked against the FIPS 180-2 appendix B examples in
 * tests/test_store.c.
 */
#include "sha256.h"

#include <string.h>

#if defined(__x86_64__) && defined(__GNUC__)
#include <cpuid.h>
#include <immintrin.h>
#define SL_SHA_X86 1
#else
#define SL_SHA_X86 0
#endif

/* FIPS 180-4 section 4.2.2: the first 32 bits of the fractional parts of the
 * cube roots of the first 64 primes. */
static const uint32_t K[64] = {
    0x428a2f98, 0x71374491, 0xb5c0fbcf, 0xe9b5dba5, 0x3956c25b, 0x59f111f1, 0x923f82a4, 0xab1c5ed5,
    0xd807aa98, 0x12835b01, 0x243185be, 0x550c7dc3, 0x72be5d74, 0x80deb1fe, 0x9bdc06a7, 0xc19bf174,
    0xe49b69c1, 0xefbe4786, 0x0fc19dc6, 0x240ca1cc, 0x2de92c6f, 0x4a7484aa, 0x5cb0a9dc, 0x76f988da,
    0x983e5152, 0xa831c66d, 0xb00327c8, 0xbf597fc7, 0xc6e00bf3, 0xd5a79147, 0x06ca6351, 0x14292967,
    0x27b70a85, 0x2e1b2138, 0x4d2c6dfc, 0x53380d13, 0x650a7354, 0x766a0abb, 0x81c2c92e, 0x92722c85,
    0xa2bfe8a1, 0xa81a664b, 0xc24b8b70, 0xc76c51a3, 0xd192e819, 0xd6990624, 0xf40e3585, 0x106aa070,
    0x19a4c116, 0x1e376c08, 0x2748774c, 0x34b0bcb5, 0x391c0cb3, 0x4ed8aa4a, 0x5b9cca4f, 0x682e6ff3,
    0x748f82ee, 0x78a5636f, 0x84c87814, 0x8cc70208, 0x90befffa, 0xa4506ceb, 0xbef9a3f7, 0xc67178f2,
};

static uint32_t rotr(uint32_t x, int n) { return (x >> n) | (x << (32 - n)); }

static uint32_t load_be32(const unsigned char *p)
{
    return (uint32_t)p[0] << 24 | (uint32_t)p[1] << 16 | (uint32_t)p[2] << 8 | (uint32_t)p[3];
}

/* FIPS 180-4 section 6.2.2 on n 64-byte blocks. */
static void blocks_portable(uint32_t h[8], const unsigned char *data, size_t n)
{
    for (; n > 0; n--, data += 64) {
        uint32_t w[64];
        for (int t = 0; t < 16; t++)
            w[t] = load_be32(data + 4 * t);
        for (int t = 16; t < 64; t++) {
            uint32_t s0 = rotr(w[t - 15], 7) ^ rotr(w[t - 15], 18) ^ (w[t - 15] >> 3);
            uint32_t s1 = rotr(w[t - 2], 17) ^ rotr(w[t - 2], 19) ^ (w[t - 2] >> 10);
            w[t] = w[t - 16] + s0 + w[t - 7] + s1;
        }
        uint32_t a = h[0], b = h[1], c = h[2], d = h[3], e = h[4], f = h[5], g = h[6], k = h[7];
        for (int t = 0; t < 64; t++) {
            uint32_t t1 = k + (rotr(e, 6) ^ rotr(e, 11) ^ rotr(e, 25)) + ((e & f) ^ (~e & g)) +
                          K[t] + w[t];
            uint32_t t2 = (rotr(a, 2) ^ rotr(a, 13) ^ rotr(a, 22)) + ((a & b) ^ (a & c) ^ (b & c));
            k = g;
            g = f;
            f = e;
            e = d + t1;
            d = c;
            c = b;
            b = a;
            a = t1 + t2;
        }
        h[0] += a, h[1] += b, h[2] += c, h[3] += d, h[4] += e, h[5] += f, h[6] += g, h[7] += k;
    }
}

#if SL_SHA_X86
/* The same on the SHA extensions. SHA256RNDS2 does two rounds on the state
 * held as (A, B, E, F) and (C, D, G, H); the message words go through
 * SHA256MSG1 and SHA256MSG2 four at a time. Each group of four rounds adds
 * the next four words and constants, and prepares later words while the
 * rounds run. */
__attribute__((target("sha,sse4.1,ssse3")))
static void blocks_extensions(uint32_t h[8], const unsigned char *data, size_t n)
{
    const __m128i byte_swap = _mm_set_epi64x(0x0c0d0e0f08090a0bLL, 0x0405060700010203LL);
    __m128i dcba = _mm_loadu_si128((const __m128i *)&h[0]);
    __m128i hgfe = _mm_loadu_si128((const __m128i *)&h[4]);
    __m128i cdab = _mm_shuffle_epi32(dcba, 0xB1);
    __m128i efgh = _mm_shuffle_epi32(hgfe, 0x1B);
    __m128i abef = _mm_alignr_epi8(cdab, efgh, 8);
    __m128i cdgh = _mm_blend_epi16(efgh, cdab, 0xF0);
    for (; n > 0; n--, data += 64) {
        __m128i abef_in = abef, cdgh_in = cdgh, w[4];
        /* unrolled, so the four message registers stay registers */
#pragma GCC unroll 16
        for (int i = 0; i < 16; i++) {
            if (i < 4)
                w[i] = _mm_shuffle_epi8(_mm_loadu_si128((const __m128i *)(data + 16 * i)), byte_swap);
            __m128i m = _mm_add_epi32(w[i % 4], _mm_loadu_si128((const __m128i *)&K[4 * i]));
            cdgh = _mm_sha256rnds2_epu32(cdgh, abef, m);
            if (i >= 3 && i <= 14) {
                __m128i next = _mm_add_epi32(w[(i + 1) % 4], _mm_alignr_epi8(w[i % 4], w[(i + 3) % 4], 4));
                w[(i + 1) % 4] = _mm_sha256msg2_epu32(next, w[i % 4]);
            }
            abef = _mm_sha256rnds2_epu32(abef, cdgh, _mm_shuffle_epi32(m, 0x0E));
            if (i >= 1 && i <= 12)
                w[(i + 3) % 4] = _mm_sha256msg1_epu32(w[(i + 3) % 4], w[i % 4]);
        }
        abef = _mm_add_epi32(abef, abef_in);
        cdgh = _mm_add_epi32(cdgh, cdgh_in);
    }
    __m128i feba = _mm_shuffle_epi32(abef, 0x1B);
    __m128i dchg = _mm_shuffle_epi32(cdgh, 0xB1);
    _mm_storeu_si128((__m128i *)&h[0], _mm_blend_epi16(feba, dchg, 0xF0));
    _mm_storeu_si128((__m128i *)&h[4], _mm_alignr_epi8(dchg, feba, 8));
}

int sl__sha256_has_extensions(void)
{
    unsigned a, b, c, d;
    if (!__get_cpuid(1, &a, &b, &c, &d) || !(c & (1u << 19)) || !(c & (1u << 9)))
        return 0; /* SSE4.1, SSSE3 */
    if (!__get_cpuid_count(7, 0, &a, &b, &c, &d))
        return 0;
    return (b >> 29) & 1; /* SHA */
}
#else
int sl__sha256_has_extensions(void) { return 0; }
#endif

static void compress(sha256_ctx *ctx, const unsigned char *data, size_t blocks)
{
#if SL_SHA_X86
    if (ctx->use_extensions) {
        blocks_extensions(ctx->h, data, blocks);
        return;
    }
#endif
    blocks_portable(ctx->h, data, blocks);
}

void sl__sha256_init_portable(sha256_ctx *ctx)
{
    /* FIPS 180-4 section 5.3.3 */
    static const uint32_t h0[8] = { 0x6a09e667, 0xbb67ae85, 0x3c6ef372, 0xa54ff53a,
                                    0x510e527f, 0x9b05688c, 0x1f83d9ab, 0x5be0cd19 };
    memset(ctx, 0, sizeof *ctx);
    memcpy(ctx->h, h0, sizeof h0);
}

void sl__sha256_init(sha256_ctx *ctx)
{
    static int extensions = -1; /* benign race: every thread finds the same */
    if (extensions < 0)
        extensions = sl__sha256_has_extensions();
    sl__sha256_init_portable(ctx);
    ctx->use_extensions = extensions;
}

void sl__sha256_update(sha256_ctx *ctx, const void *data, size_t n)
{
    const unsigned char *p = data;
    ctx->bytes += n;
    if (ctx->fill) {
        size_t take = 64 - ctx->fill < n ? 64 - ctx->fill : n;
        memcpy(ctx->block + ctx->fill, p, take);
        ctx->fill += take;
        p += take;
        n -= take;
        if (ctx->fill < 64)
            return;
        compress(ctx, ctx->block, 1);
        ctx->fill = 0;
    }
    if (n >= 64) {
        compress(ctx, p, n / 64);
        p += n / 64 * 64;
        n %= 64;
    }
    memcpy(ctx->block, p, n);
    ctx->fill = n;
}

void sl__sha256_final(sha256_ctx *ctx, unsigned char digest[32])
{
    /* FIPS 180-4 section 5.1.1: a 1 bit, zeros, the length in bits */
    uint64_t bits = ctx->bytes * 8;
    unsigned char pad[72] = { 0x80 };
    size_t zeros = (ctx->fill < 56 ? 56 : 120) - ctx->fill;
    for (int i = 0; i < 8; i++)
        pad[zeros + i] = (unsigned char)(bits >> (56 - 8 * i));
    sl__sha256_update(ctx, pad, zeros + 8);
    for (int i = 0; i < 8; i++)
        for (int j = 0; j < 4; j++)
            digest[4 * i + j] = (unsigned char)(ctx->h[i] >> (24 - 8 * j));
}

void sl__sha256_hex(const unsigned char digest[32], char hex[65])
{
    static const char digits[] = "0123456789abcdef";
    for (int i = 0; i < 32; i++) {
        hex[2 * i] = digits[digest[i] >> 4];
        hex[2 * i + 1] = digits[digest[i] & 15];
    }
    hex[64] = '\0';
}
