/* SPDX-License-Identifier: MIT
 * Sweep rows of the store: the packed blob of a device's transfer sweep (gate
 * voltages and resistances), its insertion and loading, and the import's
 * scratch table of staged runs, which uses the same blob.
 *
 * The blob gives back every double bit for bit. The row's n_points says how
 * many points it holds; its length tells the two formats apart:
 *
 * Raw (written by the first versions, still read): exactly 16 * n_points
 * bytes, per point vg then r, each a little-endian IEEE 754 double.
 *
 * Compact (written now), never a multiple of 16 bytes long:
 *   byte 0      format, 1
 *   the vg_V column, then the r_ohm column, each:
 *     byte      mode: 0 raw, 1 decimal by first differences,
 *                     2 decimal by second differences,
 *                     3 quotient by first differences,
 *                     4 quotient by second differences,
 *                     5 decimal by even steps (the vg_V column only)
 *                     (modes 3 to 5 from schema version 5 on)
 *     raw:      n_points little-endian doubles
 *     decimal:  a byte k (0..22), then n_points varints
 *     even steps: a byte k, then the varints of the first two points of
 *               mode 2; every later residual is 0 and not stored (a gate
 *               swept in equal steps: the column takes a few bytes)
 *     quotient: a little-endian double q, then a decimal column d_i as
 *               above (its byte k and varints); the values are q / d_i
 *   byte 0      padding, present exactly when the bytes before it are a
 *               multiple of 16 long
 *
 * A decimal column holds integers m_i with |m_i| < 2^53 and stands for the
 * values v_i = m_i / 10^k, worked out by one IEEE 754 division (round to
 * nearest). m_i and 10^k (k <= 22) are exact doubles, so that one division
 * rounds the decimal m_i * 10^-k correctly: the same double a correct
 * strtod gives for its text (the exact fast path of decimal to binary
 * conversion: W. D. Clinger, "How to read floating point numbers
 * accurately", PLDI 1990). CSV sweeps are short decimals ("-39.6000",
 * "927.597"), so their columns come out decimal; the encoder decodes every
 * value it codes and compares the bits, and a column with any value that
 * does not come back (-0.0, NaN, infinities, subnormals, long binary
 * fractions) stays raw.
 * A varint is the residual m_i - p_i, zigzagged (0, -1, 1, -2 -> 0, 1, 2,
 * 3) and written 7 bits a byte, low bits first, the high bit set on every
 * byte but the last. The prediction p_i is m_(i-1) in mode 1 and
 * 2 m_(i-1) - m_(i-2) in mode 2 (evenly stepped gate voltages leave zeros),
 * with m_(-1) = m_(-2) = 0 (modes 3 and 4 the same).
 *
 * A quotient column is the resistance of a file that gives drain current
 * and drain bias: R = |V_d| / |I_d| has no short decimal form, but a
 * meter's current has ("9.551234e-05"). The caller passes the one drain
 * bias of the sweep as q; the encoder finds the decimal d_i nearest q / R_i
 * at the smallest scale where q / d_i (two IEEE divisions, as the decoder
 * does them) gives every R_i back bit for bit, else the column stays raw.
 * Seven-digit currents take about three bytes a point instead of eight.
 */
#include <assert.h>
#include <float.h>
#include <math.h>
#include <stdbool.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

enum { FORMAT_COMPACT = 1 };
enum {
    MODE_RAW = 0,
    MODE_FIRST_DIFFERENCES = 1,
    MODE_SECOND_DIFFERENCES = 2,
    MODE_QUOTIENT_FIRST = 3,  /* the decimal modes + 2: quotient columns */
    MODE_QUOTIENT_SECOND = 4,
    MODE_EVEN_STEPS = 5,      /* mode 2 with only its first two residuals */
};
/* The residuals an even-steps column stores; every one after is 0. */
enum { EVEN_STEPS_STORED = 2 };
enum { QUOTIENT_MODES = MODE_QUOTIENT_FIRST - MODE_FIRST_DIFFERENCES };
enum { MAX_SCALE = 22 };                  /* 10^22 is the largest exact power of ten */
#define MANTISSA_LIMIT ((int64_t)1 << 53) /* |m| below it is an exact double */
/* A quotient column's mantissas stay below 2^51 (candidate_fits). */
#define QUOTIENT_MANTISSA_LIMIT 0x1p51
/* Residuals of |m| < 2^53 are below 2^55 in size, 2^56 zigzagged: at most
 * eight varint bytes of 7 bits. */
enum { MAX_VARINT_BYTES = 8 };
/* Sweeps stored between two hints to start writing the WAL to the disk
 * (sl__db_sqlite_start_writeback): a few hundred kilobytes. */
enum { SWEEPS_PER_WRITEBACK = 256 };

/* The exact division needs doubles evaluated as doubles (no x87 excess
 * precision, which would round twice) and the default rounding to nearest,
 * which the library never changes. Where doubles are evaluated otherwise the
 * encoder keeps every column raw and the decoder refuses decimal columns
 * rather than give other bits back. */
#if defined(FLT_EVAL_METHOD) && FLT_EVAL_METHOD == 0
#define DECIMAL_IS_EXACT 1
#else
#define DECIMAL_IS_EXACT 0
#endif

static const double POWER_OF_TEN[MAX_SCALE + 1] = {
    1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,  1e8,  1e9,  1e10, 1e11,
    1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
};

/* ---- bytes: little-endian doubles, zigzag varints ---- */

static void put_le_double(unsigned char *p, double v)
{
    uint64_t bits;
    memcpy(&bits, &v, sizeof bits);
    for (int i = 0; i < 8; i++)
        p[i] = (unsigned char)(bits >> (8 * i));
}

static double get_le_double(const unsigned char *p)
{
    uint64_t bits = 0;
    for (int i = 0; i < 8; i++)
        bits |= (uint64_t)p[i] << (8 * i);
    double v;
    memcpy(&v, &bits, sizeof v);
    return v;
}

/* Residuals of noisy resistances change sign at random: no branches on it. */
static uint64_t zigzag(int64_t v)
{
    return 2 * (uint64_t)v ^ (0 - (uint64_t)(v < 0));
}

static int64_t unzigzag(uint64_t u)
{
    return (int64_t)(u >> 1) ^ -(int64_t)(u & 1);
}

/* Without a loop where the compiler can count leading zeros: residuals of
 * noisy resistances take 2 or 3 bytes at random, which a loop mispredicts. */
static size_t varint_bytes(uint64_t u)
{
#if defined(__GNUC__)
    return (size_t)(63 - __builtin_clzll(u | 1)) / 7 + 1;
#else
    size_t n = 1;
    for (; u >= 0x80; u >>= 7)
        n++;
    return n;
#endif
}

static unsigned char *put_varint(unsigned char *p, uint64_t u)
{
    for (; u >= 0x80; u >>= 7)
        *p++ = (unsigned char)(u | 0x80);
    *p++ = (unsigned char)u;
    return p;
}

/* ---- the encoder ---- */

/* The integer nearest v * 10^scale, for |v * 10^scale| < 2^53: the m that v
 * should be m / 10^scale of; whether it is, is for the caller to check by
 * dividing back. */
static int64_t candidate_mantissa(double v, int scale)
{
    return (int64_t)rint(v * POWER_OF_TEN[scale]);
}

/* Whether v is, bit for bit, m / 10^scale for an integer |m| < 2^53. */
static int decimal_fits(double v, int scale, int64_t *m)
{
    double scaled = v * POWER_OF_TEN[scale];
    if (!(fabs(scaled) < (double)MANTISSA_LIMIT)) /* also NaN and infinities */
        return 0;
    *m = candidate_mantissa(v, scale);
    double back = (double)*m / POWER_OF_TEN[scale];
    return memcmp(&back, &v, sizeof v) == 0;
}

/* The smallest scale from `from` on at which v fits; -1 when none does. */
static int smallest_scale(double v, int from)
{
    int64_t m;
    for (int scale = from; scale <= MAX_SCALE; scale++)
        if (decimal_fits(v, scale, &m))
            return scale;
    return -1;
}

typedef struct {
    int mode;
    int scale;
    size_t bytes; /* of the column, its mode byte included */
} column_plan;

/* Check every value at scale and add up the varint bytes of the decimal
 * modes: first differences, second differences and (SIZE_MAX when a
 * residual of the second after the first two is not 0) even steps;
 * returns the index of the first value that does not fit, n when all do. */
static size_t tally_decimal(const double *v, size_t n, int scale, size_t bytes[3])
{
    int64_t m1 = 0, m2 = 0, m;
    bytes[0] = bytes[1] = bytes[2] = 0;
    for (size_t i = 0; i < n; i++) {
        if (!decimal_fits(v[i], scale, &m))
            return i;
        uint64_t second = zigzag(m - (2 * m1 - m2));
        bytes[0] += varint_bytes(zigzag(m - m1));
        bytes[1] += varint_bytes(second);
        if (i < EVEN_STEPS_STORED)
            bytes[2] = bytes[1];
        else if (second != 0)
            bytes[2] = SIZE_MAX;
        m2 = m1;
        m1 = m;
    }
    return n;
}

/* The cheapest coding of a column: decimal at the smallest scale that fits
 * every value (even steps only where even_steps allows), else raw. */
static column_plan plan_column(const double *v, size_t n, bool even_steps)
{
    column_plan raw = { MODE_RAW, 0, 1 + 8 * n };
    size_t bytes[3];
    int scale = DECIMAL_IS_EXACT ? 0 : -1;
    while (scale >= 0) {
        size_t misfit = tally_decimal(v, n, scale, bytes);
        if (misfit == n)
            break;
        scale = smallest_scale(v[misfit], scale + 1);
    }
    if (scale < 0)
        return raw;
    column_plan first = { MODE_FIRST_DIFFERENCES, scale, 2 + bytes[0] };
    column_plan second = { MODE_SECOND_DIFFERENCES, scale, 2 + bytes[1] };
    column_plan best = second.bytes < first.bytes ? second : first;
    if (even_steps && bytes[2] != SIZE_MAX && 2 + bytes[2] < best.bytes)
        best = (column_plan){ MODE_EVEN_STEPS, scale, 2 + bytes[2] };
    return best.bytes < raw.bytes ? best : raw;
}

/* The residual of mantissa m after *m1 and *m2 (the two before it), which
 * move on by one. */
static unsigned char *put_residual(unsigned char *p, int mode, int64_t m, int64_t *m1,
                                   int64_t *m2)
{
    int64_t predicted = mode == MODE_FIRST_DIFFERENCES ? *m1 : 2 * *m1 - *m2;
    *m2 = *m1;
    *m1 = m;
    return put_varint(p, zigzag(m - predicted));
}

static unsigned char *put_column(unsigned char *p, const double *v, size_t n, column_plan plan)
{
    *p++ = (unsigned char)plan.mode;
    if (plan.mode == MODE_RAW) {
        for (size_t i = 0; i < n; i++, p += 8)
            put_le_double(p, v[i]);
        return p;
    }
    *p++ = (unsigned char)plan.scale;
    int even = plan.mode == MODE_EVEN_STEPS;
    size_t stored = even && n > EVEN_STEPS_STORED ? EVEN_STEPS_STORED : n;
    int64_t m1 = 0, m2 = 0;
    for (size_t i = 0; i < stored; i++) /* every mantissa checked by tally_decimal */
        p = put_residual(p, even ? MODE_SECOND_DIFFERENCES : plan.mode,
                         candidate_mantissa(v[i], plan.scale), &m1, &m2);
    return p;
}

/* ---- the encoder's quotient columns ---- */

/* Rounding to an integer by adding and taking away 1.5 * 2^52 is exact for
 * |x| < 2^51 under round to nearest (which DECIMAL_IS_EXACT assumes
 * already); a candidate beyond is refused by candidate_fits. */
#define ROUND_OFF 0x1.8p52

/* The mantissa m (as a double) nearest q / v * 10^scale, given p = 10^scale
 * and qp = q p, and the value q / (m / p) it gives back. */
static inline void quotient_candidate(double q, double qp, double p, double v, double *m,
                                      double *back)
{
    *m = (qp / v + ROUND_OFF) - ROUND_OFF;
    *back = q / (*m / p);
}

/* Whether the candidate gives v back bit for bit, its mantissa in range. */
static inline bool candidate_fits(double v, double m, double back)
{
    return fabs(m) < QUOTIENT_MANTISSA_LIMIT && memcmp(&back, &v, sizeof v) == 0;
}

/* Whether v is q / (m / 10^scale) for the candidate m. */
static bool quotient_fits(double q, double v, int scale)
{
    double p = POWER_OF_TEN[scale], m, back;
    quotient_candidate(q, q * p, p, v, &m, &back);
    return candidate_fits(v, m, back);
}

/* Every value's candidate at scale. Nothing carried from one value to the
 * next and no branch: the compiler may do two values an instruction, and
 * the divisions of many are under way at once. */
static void quotient_candidates(double q, const double *restrict v, size_t n, int scale,
                                double *restrict m, double *restrict back)
{
    const double p = POWER_OF_TEN[scale], qp = q * p;
    for (size_t i = 0; i < n; i++)
        quotient_candidate(q, qp, p, v[i], &m[i], &back[i]);
}

/* The quotient coding of v over q: the smallest scale at which every value
 * comes back, the mantissas in m (n); false when there is none. back is
 * scratch (2 n). */
static bool plan_quotient(double q, const double *v, size_t n, int64_t *m, double *back,
                          column_plan *plan)
{
    /* start where the first value and the smallest quotient (the largest
     * value: the smallest current, with the most digits after the point)
     * fit, which is where every value usually does */
    size_t largest = 0;
    for (size_t i = 1; i < n; i++)
        largest = fabs(v[i]) > fabs(v[largest]) ? i : largest;
    int scale = 0;
    for (size_t k = 0; k < 2; k++)
        while (!quotient_fits(q, v[k ? largest : 0], scale))
            if (++scale > MAX_SCALE)
                return false;
    size_t bytes[2] = { 0, 0 };
    for (size_t misfit = 0; misfit < n;) {
        quotient_candidates(q, v, n, scale, back + n, back);
        int64_t m1 = 0, m2 = 0;
        bytes[0] = bytes[1] = 0;
        for (misfit = 0; misfit < n && candidate_fits(v[misfit], back[n + misfit], back[misfit]);
             misfit++) {
            m[misfit] = (int64_t)back[n + misfit];
            bytes[0] += varint_bytes(zigzag(m[misfit] - m1));
            bytes[1] += varint_bytes(zigzag(m[misfit] - (2 * m1 - m2)));
            m2 = m1;
            m1 = m[misfit];
        }
        if (misfit < n) /* a finer scale for that value, then every value again */
            do
                if (++scale > MAX_SCALE)
                    return false;
            while (!quotient_fits(q, v[misfit], scale));
    }
    int second = bytes[1] < bytes[0];
    plan->mode = second ? MODE_QUOTIENT_SECOND : MODE_QUOTIENT_FIRST;
    plan->scale = scale;
    plan->bytes = 2 + 8 + bytes[second];
    return true;
}

static unsigned char *put_quotient(unsigned char *p, double q, const int64_t *m, size_t n,
                                   column_plan plan)
{
    *p++ = (unsigned char)plan.mode;
    put_le_double(p, q);
    p += 8;
    *p++ = (unsigned char)plan.scale;
    int64_t m1 = 0, m2 = 0;
    for (size_t i = 0; i < n; i++)
        p = put_residual(p, plan.mode - QUOTIENT_MODES, m[i], &m1, &m2);
    return p;
}

/* The r_ohm column's plan: as a quotient over the drain bias when it is
 * given and that takes fewer bytes than the column's own plan; *m then
 * holds the mantissas (malloc'd). False when out of memory. */
static bool plan_resistance(const double *r_ohm, size_t n, double drain_bias_V, column_plan *r,
                            int64_t **m)
{
    *m = NULL;
    *r = plan_column(r_ohm, n, false);
    if (r->mode != MODE_RAW || !DECIMAL_IS_EXACT || !(drain_bias_V > 0.0) ||
        !isfinite(drain_bias_V) || n == 0)
        return true;
    /* the mantissas, then scratch for the values they give back and the
     * candidates */
    int64_t *mantissas = malloc(n * (sizeof *mantissas + 2 * sizeof(double)));
    if (!mantissas)
        return false;
    column_plan q;
    double *back = (double *)(mantissas + n);
    if (plan_quotient(drain_bias_V, r_ohm, n, mantissas, back, &q) && q.bytes < r->bytes) {
        *r = q;
        *m = mantissas;
    } else {
        free(mantissas);
    }
    return true;
}

/* The coded vg_V column kept in memo when it holds these gate voltages;
 * NULL otherwise. */
static const unsigned char *memo_column(const sl__sweep_memo *memo, const double *vg_V, size_t n)
{
    if (!memo || memo->n != n || n == 0 || memcmp(memo->vg_V, vg_V, n * sizeof *vg_V) != 0)
        return NULL;
    return memo->coded;
}

/* Keep the gate voltages and their coded column; a memo that cannot get
 * the memory is left empty (the next sweep codes its column again). */
static void memo_keep(sl__sweep_memo *memo, const double *vg_V, size_t n,
                      const unsigned char *coded, size_t bytes)
{
    sl__sweep_memo_clear(memo);
    memo->vg_V = malloc(n * sizeof *vg_V);
    memo->coded = malloc(bytes);
    if (!memo->vg_V || !memo->coded) {
        sl__sweep_memo_clear(memo);
        return;
    }
    memcpy(memo->vg_V, vg_V, n * sizeof *vg_V);
    memcpy(memo->coded, coded, bytes);
    memo->n = n;
    memo->bytes = bytes;
}

void sl__sweep_memo_clear(sl__sweep_memo *memo)
{
    free(memo->vg_V);
    free(memo->coded);
    *memo = (sl__sweep_memo){ 0 };
}

unsigned char *sl__store_pack_sweep_memo(const double *vg_V, const double *r_ohm, size_t n,
                                        double drain_bias_V, sl__sweep_memo *memo,
                                        size_t *bytes)
{
    const unsigned char *kept = memo_column(memo, vg_V, n);
    column_plan vg = { MODE_RAW, 0, kept ? memo->bytes : 0 }, r;
    if (!kept)
        vg = plan_column(vg_V, n, true);
    int64_t *m = NULL;
    if (!plan_resistance(r_ohm, n, drain_bias_V, &r, &m))
        return NULL;
    size_t length = 1 + vg.bytes + r.bytes;
    int pad = length % 16 == 0;
    unsigned char *blob = malloc(length + pad);
    if (blob) {
        blob[0] = FORMAT_COMPACT;
        unsigned char *p = blob + 1 + vg.bytes;
        if (kept)
            memcpy(blob + 1, kept, vg.bytes);
        else if (put_column(blob + 1, vg_V, n, vg) == p && memo)
            memo_keep(memo, vg_V, n, blob + 1, vg.bytes);
        unsigned char *end = m ? put_quotient(p, drain_bias_V, m, n, r) : put_column(p, r_ohm, n, r);
        assert(end == blob + length); /* what the plans counted */
        if (pad)
            *end = 0;
        *bytes = length + pad;
    }
    free(m);
    return blob;
}

unsigned char *sl__store_pack_sweep(const double *vg_V, const double *r_ohm, size_t n,
                                   double drain_bias_V, size_t *bytes)
{
    return sl__store_pack_sweep_memo(vg_V, r_ohm, n, drain_bias_V, NULL, bytes);
}

/* ---- the decoder ---- */

typedef struct {
    const unsigned char *p, *end;
    const char *damage; /* what is wrong, once something is */
} blob_reader;

static int read_fails(blob_reader *rd, const char *damage)
{
    rd->damage = damage;
    return 0;
}

static int read_byte(blob_reader *rd, int *byte)
{
    if (rd->p == rd->end)
        return read_fails(rd, "it ends early");
    *byte = *rd->p++;
    return 1;
}

static int read_residual(blob_reader *rd, int64_t *residual)
{
    uint64_t u = 0;
    for (int i = 0; i < MAX_VARINT_BYTES; i++) {
        if (rd->p == rd->end)
            return read_fails(rd, "it ends early");
        unsigned byte = *rd->p++;
        u |= (uint64_t)(byte & 0x7f) << (7 * i);
        if (!(byte & 0x80)) {
            *residual = unzigzag(u);
            return 1;
        }
    }
    return read_fails(rd, "a varint runs on too long");
}

static int read_raw_column(blob_reader *rd, double *v, size_t n)
{
    if ((size_t)(rd->end - rd->p) / 8 < n)
        return read_fails(rd, "it ends early");
    for (size_t i = 0; i < n; i++, rd->p += 8)
        v[i] = get_le_double(rd->p);
    return 1;
}

/* A decimal column whose first `stored` residuals are in the blob, the
 * rest 0 (n for modes 1 and 2, EVEN_STEPS_STORED for mode 5). */
static int read_decimal_column(blob_reader *rd, double *v, size_t n, int mode, size_t stored)
{
    int scale;
    if (!read_byte(rd, &scale))
        return 0;
    if (scale > MAX_SCALE)
        return read_fails(rd, "a decimal scale is out of range");
    if (!DECIMAL_IS_EXACT)
        return read_fails(rd, "decimal columns need FLT_EVAL_METHOD 0 to come back exactly");
    int64_t m1 = 0, m2 = 0, residual = 0;
    for (size_t i = 0; i < n; i++) {
        if (i < stored && !read_residual(rd, &residual))
            return 0;
        if (i >= stored)
            residual = 0;
        int64_t m = (mode == MODE_FIRST_DIFFERENCES ? m1 : 2 * m1 - m2) + residual;
        if (m <= -MANTISSA_LIMIT || m >= MANTISSA_LIMIT)
            return read_fails(rd, "a mantissa is out of range");
        v[i] = (double)m / POWER_OF_TEN[scale];
        m2 = m1;
        m1 = m;
    }
    return 1;
}

/* q / d_i, the d_i a decimal column: the encoder's two divisions. */
static int read_quotient_column(blob_reader *rd, double *v, size_t n, int decimal_mode)
{
    if ((size_t)(rd->end - rd->p) < 8)
        return read_fails(rd, "it ends early");
    double q = get_le_double(rd->p);
    rd->p += 8;
    if (!read_decimal_column(rd, v, n, decimal_mode, n))
        return 0;
    for (size_t i = 0; i < n; i++)
        v[i] = q / v[i];
    return 1;
}

/* even_steps: the vg_V column, the one that may be in mode 5 (the r_ohm
 * column takes a byte a point at least, which bounds a damaged count). */
static int read_column(blob_reader *rd, double *v, size_t n, bool even_steps)
{
    int mode;
    if (!read_byte(rd, &mode))
        return 0;
    if (mode == MODE_RAW)
        return read_raw_column(rd, v, n);
    if (mode == MODE_FIRST_DIFFERENCES || mode == MODE_SECOND_DIFFERENCES)
        return read_decimal_column(rd, v, n, mode, n);
    if (mode == MODE_EVEN_STEPS && even_steps)
        return read_decimal_column(rd, v, n, MODE_SECOND_DIFFERENCES, EVEN_STEPS_STORED);
    if (mode == MODE_QUOTIENT_FIRST || mode == MODE_QUOTIENT_SECOND)
        return read_quotient_column(rd, v, n, mode - QUOTIENT_MODES);
    return read_fails(rd, "a column has an unknown mode");
}

static void read_raw_points(double *vg_V, double *r_ohm, size_t n, const unsigned char *blob)
{
    for (size_t i = 0; i < n; i++) {
        vg_V[i] = get_le_double(blob + 16 * i);
        r_ohm[i] = get_le_double(blob + 16 * i + 8);
    }
}

static int read_compact(blob_reader *rd, const unsigned char *blob, double *vg_V,
                        double *r_ohm, size_t n)
{
    int format;
    if (!read_byte(rd, &format))
        return 0;
    if (format != FORMAT_COMPACT)
        return read_fails(rd, "its format is unknown");
    if (!read_column(rd, vg_V, n, true) || !read_column(rd, r_ohm, n, false))
        return 0;
    size_t used = (size_t)(rd->p - blob), left = (size_t)(rd->end - rd->p);
    int pad_expected = used % 16 == 0;
    if (left != (size_t)pad_expected || (pad_expected && *rd->p != 0))
        return read_fails(rd, "its length does not match its points");
    return 1;
}

sl_status sl__store_unpack_sweep(double *vg_V, double *r_ohm, size_t n,
                                const unsigned char *blob, size_t bytes, const char **damage)
{
    blob_reader rd = { blob, bytes ? blob + bytes : blob, NULL };
    /* every format takes at least a byte a point: a larger count is damage,
     * and 16 * n below cannot overflow */
    if (n > bytes || (bytes && !blob))
        read_fails(&rd, "its length does not match its points");
    else if (bytes == 16 * n)
        read_raw_points(vg_V, r_ohm, n, blob);
    else
        read_compact(&rd, blob, vg_V, r_ohm, n);
    *damage = rd.damage;
    return rd.damage ? SL_EDB : SL_OK;
}

/* ---- rows of the sweep table and of the import's scratch table ---- */

sl_status sl__store_insert_sweep(sl_store *store, long measurement_id, const sl_store_device *dev,
                                sl_diag *diag)
{
    if (!store->insert_sweep &&
        sl__store_prepare(store, &store->insert_sweep,
                         "INSERT INTO sweep (measurement_id, n_points, points) VALUES (?1, ?2, ?3) "
                         "ON CONFLICT (measurement_id) DO UPDATE SET n_points = excluded.n_points, "
                         "points = excluded.points", diag) != SL_OK)
        return SL_EDB;
    size_t bytes = 0;
    unsigned char *blob = sl__store_pack_sweep_memo(dev->vg_V, dev->r_ohm, dev->n_points,
                                                   dev->drain_bias_V, &store->vg_memo, &bytes);
    if (!blob)
        return SL_ENOMEM;
    sl__stmt *st = store->insert_sweep;
    sl__db_bind_int64(st, 1, measurement_id);
    sl__db_bind_int64(st, 2, (long long)dev->n_points);
    sl__db_bind_blob(st, 3, blob, bytes);
    free(blob);
    if (++store->sweeps_unflushed == SWEEPS_PER_WRITEBACK) {
        store->sweeps_unflushed = 0;
        sl__db_sqlite_start_writeback(store->db);
    }
    return sl__store_step_done(store, st, diag, "store a sweep");
}

/* Staged runs are kept as packed blobs, like stored sweeps: one row per run,
 * and every double comes back bit for bit (a REAL column would turn -0.0 into
 * the integer 0). */
static sl_status ensure_stage(sl_store *store, sl_diag *diag)
{
    if (store->has_stage)
        return SL_OK;
    sl_status s = sl__store_exec(store, sl__store_is_pg(store)
        ? "CREATE TEMP TABLE IF NOT EXISTS stage (rowid bigint GENERATED BY DEFAULT AS IDENTITY, "
          "key bigint NOT NULL, n_points bigint NOT NULL, points bytea NOT NULL)"
        : "CREATE TEMP TABLE IF NOT EXISTS stage (key INTEGER NOT NULL, n_points INTEGER NOT NULL, "
          "points BLOB NOT NULL)", diag, "create the import scratch table");
    if (s == SL_OK)
        s = sl__store_exec(store, "CREATE INDEX IF NOT EXISTS stage_by_key ON stage(key)",
                          diag, "index the import scratch table");
    if (s == SL_OK)
        s = sl__store_prepare(store, &store->stage_point,
                             "INSERT INTO stage (key, n_points, points) VALUES (?1, ?2, ?3)",
                             diag);
    store->has_stage = s == SL_OK;
    return s;
}

sl_status sl_store_stage_points(sl_store *store, long key, const double *vg_V,
                                const double *r_ohm, size_t n, sl_diag *diag)
{
    sl_status s = ensure_stage(store, diag);
    if (s != SL_OK || n == 0)
        return s;
    size_t bytes = 0;
    unsigned char *blob = sl__store_pack_sweep(vg_V, r_ohm, n, NAN, &bytes);
    if (!blob)
        return SL_ENOMEM;
    sl__db_bind_int64(store->stage_point, 1, key);
    sl__db_bind_int64(store->stage_point, 2, (long long)n);
    sl__db_bind_blob(store->stage_point, 3, blob, bytes);
    free(blob);
    return sl__store_step_done(store, store->stage_point, diag, "stage sweep points");
}

typedef struct {
    double *vg_V, *r_ohm;
    size_t n, capacity;
} point_arrays;

static int grow_points(point_arrays *a, size_t need)
{
    if (need <= a->capacity && a->vg_V)
        return 1;
    size_t capacity = 2 * a->capacity > need ? 2 * a->capacity : (need ? need : 1);
    double *vg = realloc(a->vg_V, capacity * sizeof *vg);
    if (vg)
        a->vg_V = vg;
    double *r = vg ? realloc(a->r_ohm, capacity * sizeof *r) : NULL;
    if (r)
        a->r_ohm = r;
    if (vg && r)
        a->capacity = capacity;
    return vg && r;
}

/* Append the points of the row st stands on (columns n_points, points). */
static sl_status append_row_points(point_arrays *a, sl__stmt *st, const char **damage)
{
    long long count = sl__db_column_int64(st, 0);
    const unsigned char *blob = sl__db_column_blob(st, 1);
    size_t bytes = (size_t)sl__db_column_bytes(st, 1);
    /* every format takes a byte a point at least: no huge allocation for a
     * damaged count */
    if (count < 0 || (uint64_t)count > bytes) {
        *damage = "its length does not match its points";
        return SL_EDB;
    }
    if (!grow_points(a, a->n + (size_t)count))
        return SL_ENOMEM;
    sl_status s = sl__store_unpack_sweep(a->vg_V + a->n, a->r_ohm + a->n, (size_t)count, blob,
                                        bytes, damage);
    if (s == SL_OK)
        a->n += (size_t)count;
    return s;
}

static void give_points(point_arrays *a, sl_status s, double **vg_V, double **r_ohm, size_t *n)
{
    if (s != SL_OK) {
        free(a->vg_V);
        free(a->r_ohm);
        *a = (point_arrays){ 0 };
    }
    *vg_V = a->vg_V;
    *r_ohm = a->r_ohm;
    *n = a->n;
}

sl_status sl_store_staged_points(sl_store *store, double **vg_V, double **r_ohm, size_t *n,
                                 long key, sl_diag *diag)
{
    *vg_V = *r_ohm = NULL;
    *n = 0;
    sl__stmt *st = NULL;
    sl_status s = ensure_stage(store, diag);
    if (s == SL_OK)
        s = sl__store_prepare(store, &st,
                             "SELECT n_points, points FROM stage WHERE key = ?1 ORDER BY rowid",
                             diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, key);
    point_arrays a = { 0 };
    const char *damage = NULL;
    while (s == SL_OK && sl__db_step(st) == SL__DB_ROW)
        s = append_row_points(&a, st, &damage);
    sl__db_finalize(st);
    if (damage)
        sl_diag_error(diag, "staged sweep points under key %ld are damaged: %s", key, damage);
    give_points(&a, s, vg_V, r_ohm, n);
    return s;
}

sl_status sl_store_load_sweep(sl_store *store, double **vg_V, double **r_ohm, size_t *n,
                              long measurement_id, sl_diag *diag)
{
    *vg_V = *r_ohm = NULL;
    *n = 0;
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
                                   "SELECT n_points, points FROM sweep WHERE measurement_id = ?1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, measurement_id);
    int rc = sl__db_step(st);
    if (rc == SL__DB_FAIL) { /* a failed query is an error, never "no sweep stored" */
        s = sl__store_db_error(store, diag, "read a stored sweep");
        sl__db_finalize(st);
        return s;
    }
    if (rc != SL__DB_ROW) {
        sl__db_finalize(st);
        return SL_ENOTFOUND;
    }
    point_arrays a = { 0 };
    const char *damage = NULL;
    s = append_row_points(&a, st, &damage);
    if (damage)
        sl_diag_error(diag, "sweep of measurement %ld is damaged: %s (%zu bytes for %lld points)",
                      measurement_id, damage, sl__db_column_bytes(st, 1),
                      (long long)sl__db_column_int64(st, 0));
    sl__db_finalize(st);
    give_points(&a, s, vg_V, r_ohm, n);
    return s;
}
