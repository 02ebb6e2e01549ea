/* SPDX-License-Identifier: MIT
 * An import into a PostgreSQL server without a round trip per device: rows
 * stream by binary COPY into a staging table and go into device,
 * measurement and sweep by INSERT ... SELECT when anything else needs the
 * database (docs/store.md, "Imports on a server").
 */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

/* The staging table: one row a measurement, the columns of device,
 * measurement and sweep side by side (the order of the COPY's fields). */
#define STAGE_TABLE "import_row"
#define STAGE_FIELDS 31
static const char stage_create_sql[] =
    "CREATE TEMP TABLE IF NOT EXISTS " STAGE_TABLE " (measurement_id bigint, lot_id bigint, "
    "wafer text COLLATE \"C\", name text COLLATE \"C\", die_x bigint, die_y bigint, "
    "device_type text COLLATE \"C\", channel_length_um float8, channel_width_um float8, "
    "run_id bigint, source text, source_line bigint, fit_class text COLLATE \"C\", "
    "fit_model text COLLATE \"C\", cnp_V float8, cnp_sigma_V float8, mobility_cm2_per_Vs float8, "
    "mobility_sigma_cm2_per_Vs float8, n0_per_cm2 float8, n0_sigma_per_cm2 float8, "
    "r_contact_ohm float8, r_contact_sigma_ohm float8, rel_rms float8, r_squared float8, "
    "n_points bigint, electron_mobility_cm2_per_Vs float8, hole_mobility_cm2_per_Vs float8, "
    "n_spikes bigint, hysteresis_V float8, points_dropped bigint, points bytea) "
    "ON COMMIT DROP";

/* A device first: the first staged row of each device, in the order staged
 * (row ids as in a row-by-row import); a device stored already stays. */
static const char stage_devices_sql[] =
    "INSERT INTO device (lot_id, wafer, name, die_x, die_y, device_type, channel_length_um, "
    "channel_width_um) SELECT lot_id, wafer, name, die_x, die_y, device_type, "
    "channel_length_um, channel_width_um FROM (SELECT DISTINCT ON (lot_id, wafer, name) * FROM "
    STAGE_TABLE " ORDER BY lot_id, wafer, name, measurement_id) f ORDER BY measurement_id "
    "ON CONFLICT (lot_id, wafer, name) DO NOTHING";

/* The measurements, each joined to its device at the same die: a staged
 * row whose device the lot has at another die finds none, and the count
 * tells (the import looks for such clashes before it stages a row). Each
 * row looks its device up through the unique index (a LATERAL ... LIMIT 1
 * the planner keeps as such): a join would read the whole device table of
 * the server, every lot's, for each batch. */
static const char stage_measurements_sql[] =
    "INSERT INTO measurement (id, device_id, run_id, source, source_line, " MEASUREMENT_COLUMNS
    ") SELECT s.measurement_id, d.id, s.run_id, s.source, s.source_line, " MEASUREMENT_COLUMNS
    " FROM " STAGE_TABLE " s CROSS JOIN LATERAL (SELECT id FROM device WHERE lot_id = s.lot_id "
    "AND wafer = s.wafer AND name = s.name AND die_x = s.die_x AND die_y = s.die_y LIMIT 1) d "
    "ORDER BY s.measurement_id";

static const char stage_sweeps_sql[] =
    "INSERT INTO sweep (measurement_id, n_points, points) SELECT measurement_id, n_points, "
    "points FROM " STAGE_TABLE " WHERE points IS NOT NULL ORDER BY measurement_id";

/* Measurement ids come from the server in blocks, the first of this size,
 * each next one twice the last up to the largest. */
#define ID_BLOCK_FIRST 1024
#define ID_BLOCK_MAX 32768

/* A device of the lot (stored or staged) in 16 bytes: a 64-bit key of its
 * lot, wafer and name (0 marks an empty slot), its die when it fits 16
 * bits (else DIE_UNKNOWN: every row of it takes the row-by-row path), and
 * a bit for each of the import's first 32 runs that has it staged. */
typedef struct {
    uint64_t key;
    int16_t die_x, die_y;
    uint32_t runs;
} device_slot;

#define DIE_UNKNOWN INT16_MIN
#define TRACKED_RUNS 32

struct sl__bulk {
    long lot_id;
    device_slot *devices;        /* open addressing, a power of two slots */
    size_t n_devices, cap_devices;
    long runs[TRACKED_RUNS];     /* the runs of the device slots' bits */
    size_t n_runs;
    long long *ids;              /* measurement ids from the server, unused from next_id */
    size_t n_ids, next_id, block;
    long staged;                 /* rows in the staging table */
    int failed;                  /* moving the staged rows failed */
    char error[256];             /* ... for a reason of the store's own */
    unsigned char *row;          /* the COPY row being written */
    size_t row_len, row_cap;
};

/* ---- keys: FNV-1a over the fields, then a 64-bit finaliser ---- */

static uint64_t fnv(uint64_t h, const void *bytes, size_t n)
{
    const unsigned char *p = bytes;
    for (size_t i = 0; i < n; i++)
        h = (h ^ p[i]) * 0x100000001b3ULL;
    return h;
}

static uint64_t finish_key(uint64_t h)
{
    h ^= h >> 33;
    h *= 0xff51afd7ed558ccdULL;
    h ^= h >> 33;
    h *= 0xc4ceb9fe1a85ec53ULL;
    h ^= h >> 33;
    return h ? h : 1;
}

static uint64_t key_of(long long number, const char *wafer, const char *name)
{
    uint64_t h = fnv(0xcbf29ce484222325ULL, &number, sizeof number);
    h = fnv(h, wafer, strlen(wafer) + 1);
    return finish_key(fnv(h, name, strlen(name) + 1));
}

static int16_t die16(long v) { return v > INT16_MIN && v <= INT16_MAX ? (int16_t)v : DIE_UNKNOWN; }

/* ---- the table of the lot's devices ---- */

static device_slot *device_find(device_slot *slots, size_t cap, uint64_t key)
{
    size_t i = (size_t)key & (cap - 1);
    while (slots[i].key && slots[i].key != key)
        i = (i + 1) & (cap - 1);
    return &slots[i];
}

static int devices_grow(sl__bulk *b)
{
    size_t cap = b->cap_devices ? 2 * b->cap_devices : 1024;
    device_slot *slots = calloc(cap, sizeof *slots);
    if (!slots)
        return 0;
    for (size_t i = 0; i < b->cap_devices; i++)
        if (b->devices[i].key)
            *device_find(slots, cap, b->devices[i].key) = b->devices[i];
    free(b->devices);
    b->devices = slots;
    b->cap_devices = cap;
    return 1;
}

/* The device's slot (a new one has key 0, to be filled); NULL when out of
 * memory. Slots stay at most three quarters full. */
static device_slot *device_slot_for(sl__bulk *b, uint64_t key)
{
    if (4 * (b->n_devices + 1) > 3 * b->cap_devices && !devices_grow(b))
        return NULL;
    return device_find(b->devices, b->cap_devices, key);
}

static void device_fill(sl__bulk *b, device_slot *slot, uint64_t key, long die_x, long die_y)
{
    *slot = (device_slot){ key, die16(die_x), die16(die_y), 0 };
    b->n_devices++;
}

/* The run's bit in a device slot, 0 past the first TRACKED_RUNS runs. */
static uint32_t run_bit(sl__bulk *b, long run_id)
{
    for (size_t i = 0; i < b->n_runs; i++)
        if (b->runs[i] == run_id)
            return (uint32_t)1 << i;
    if (b->n_runs == TRACKED_RUNS)
        return 0;
    b->runs[b->n_runs] = run_id;
    return (uint32_t)1 << b->n_runs++;
}

/* ---- a row in COPY's binary format: big-endian numbers, each field its
 * length first (-1 for NULL) ---- */

static int row_reserve(sl__bulk *b, size_t more)
{
    if (b->row_len + more <= b->row_cap)
        return 1;
    size_t cap = 2 * b->row_cap > b->row_len + more ? 2 * b->row_cap : b->row_len + more + 256;
    unsigned char *row = realloc(b->row, cap);
    if (!row)
        return 0;
    b->row = row;
    b->row_cap = cap;
    return 1;
}

static void put_be(sl__bulk *b, uint64_t v, int bytes)
{
    for (int i = bytes - 1; i >= 0; i--)
        b->row[b->row_len++] = (unsigned char)(v >> (8 * i));
}

static int field(sl__bulk *b, const void *data, long len)
{
    if (!row_reserve(b, 4 + (len > 0 ? (size_t)len : 0)))
        return 0;
    put_be(b, (uint64_t)(uint32_t)(int32_t)len, 4);
    if (len > 0) {
        memcpy(b->row + b->row_len, data, (size_t)len);
        b->row_len += (size_t)len;
    }
    return 1;
}

static int field_int8(sl__bulk *b, long long v)
{
    unsigned char be[8];
    for (int i = 0; i < 8; i++)
        be[i] = (unsigned char)((uint64_t)v >> (8 * (7 - i)));
    return field(b, be, 8);
}

static int field_count(sl__bulk *b, long v) { return v >= 0 ? field_int8(b, v) : field(b, NULL, -1); }

/* A number NULL unless finite, as sl__store_bind_real_or_null stores it. */
static int field_real(sl__bulk *b, double v)
{
    if (!isfinite(v))
        return field(b, NULL, -1);
    uint64_t bits;
    memcpy(&bits, &v, sizeof bits);
    unsigned char be[8];
    for (int i = 0; i < 8; i++)
        be[i] = (unsigned char)(bits >> (8 * (7 - i)));
    return field(b, be, 8);
}

static int field_text(sl__bulk *b, const char *s)
{
    return s ? field(b, s, (long)strlen(s)) : field(b, NULL, -1);
}

/* The fields of a measurement's row, in the staging table's order. */
static int encode_row(sl__bulk *b, long long id, long lot_id, long run_id,
                      const sl_store_device *d, const unsigned char *blob, size_t bytes)
{
    b->row_len = 0;
    if (!row_reserve(b, 2))
        return 0;
    put_be(b, STAGE_FIELDS, 2);
    int ok = field_int8(b, id) && field_int8(b, lot_id) && field_text(b, d->wafer) &&
             field_text(b, d->name) && field_int8(b, d->die_x) && field_int8(b, d->die_y) &&
             field_text(b, d->device_type) && field_real(b, d->channel_length_um) &&
             field_real(b, d->channel_width_um) && field_int8(b, run_id) &&
             field_text(b, d->source) && field_count(b, d->source_line > 0 ? d->source_line : -1) &&
             field_text(b, d->fit_class) && field_text(b, d->fit_model);
    const double values[] = { d->cnp_V, d->cnp_sigma_V, d->mobility_cm2_per_Vs,
                              d->mobility_sigma_cm2_per_Vs, d->n0_per_cm2, d->n0_sigma_per_cm2,
                              d->r_contact_ohm, d->r_contact_sigma_ohm, d->rel_rms, d->r_squared };
    for (int i = 0; ok && i < 10; i++)
        ok = field_real(b, values[i]);
    return ok && (d->vg_V ? field_int8(b, (long long)d->n_points) : field(b, NULL, -1)) &&
           field_real(b, d->electron_mobility_cm2_per_Vs) &&
           field_real(b, d->hole_mobility_cm2_per_Vs) && field_count(b, d->n_spikes) &&
           field_real(b, d->hysteresis_V) && field_count(b, d->points_dropped) &&
           (blob ? field(b, blob, (long)bytes) : field(b, NULL, -1));
}

/* ---- the staging table into the stored tables ---- */

static const unsigned char copy_header[19] = { 'P', 'G', 'C', 'O', 'P', 'Y', '\n', 0xff, '\r',
                                               '\n', 0 }; /* then flags and extension: 0, 0 */
static const unsigned char copy_trailer[2] = { 0xff, 0xff };

/* The staged rows into device, measurement and sweep; SL__DB_OK or
 * SL__DB_FAIL (the connection's or the bulk's error says why). */
static int move_staged(sl_store *store)
{
    sl__bulk *b = store->bulk;
    sl__db *db = store->db;
    if (!sl__db_pg_copying(db))
        return SL__DB_OK;
    int rc = sl__db_pg_copy_put(db, copy_trailer, sizeof copy_trailer);
    rc = sl__db_pg_copy_end(db, rc == SL__DB_OK ? NULL : "the rows did not all go out");
    if (rc == SL__DB_OK)
        rc = sl__db_exec(db, stage_devices_sql);
    if (rc == SL__DB_OK)
        rc = sl__db_exec(db, stage_measurements_sql);
    if (rc == SL__DB_OK && sl__db_changes(db) != b->staged) {
        snprintf(b->error, sizeof b->error, "%ld of %ld measurements name a device the lot has "
                 "at another die", b->staged - sl__db_changes(db), b->staged);
        rc = SL__DB_FAIL;
    }
    if (rc == SL__DB_OK)
        rc = sl__db_exec(db, stage_sweeps_sql);
    if (rc == SL__DB_OK)
        rc = sl__db_exec(db, "TRUNCATE " STAGE_TABLE);
    b->staged = 0;
    b->failed |= rc != SL__DB_OK;
    return rc;
}

/* The connection's hook: another statement wants the staged rows stored. */
static int settle_hook(void *ctx) { return move_staged(ctx); }

static sl_status move_staged_or_error(sl_store *store, sl_diag *diag)
{
    return move_staged(store) == SL__DB_OK ? SL_OK
                                           : sl__store_db_error(store, diag, "store the imported devices");
}

static sl_status open_copy(sl_store *store, sl_diag *diag)
{
    sl__db *db = store->db;
    if (sl__db_pg_copying(db))
        return SL_OK;
    if (sl__db_pg_copy_begin(db, "COPY " STAGE_TABLE " FROM STDIN (FORMAT binary)") != SL__DB_OK ||
        sl__db_pg_copy_put(db, copy_header, sizeof copy_header) != SL__DB_OK)
        return sl__store_db_error(store, diag, "send the imported devices");
    return SL_OK;
}

/* A block of measurement ids from the server's sequence, in order. */
static sl_status fetch_ids(sl_store *store, sl_diag *diag)
{
    sl__bulk *b = store->bulk;
    b->block = b->block ? (2 * b->block < ID_BLOCK_MAX ? 2 * b->block : ID_BLOCK_MAX)
                        : ID_BLOCK_FIRST;
    long long *ids = realloc(b->ids, b->block * sizeof *ids);
    if (!ids)
        return SL_ENOMEM;
    b->ids = ids;
    b->n_ids = b->next_id = 0;
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT nextval(pg_get_serial_sequence('measurement', 'id')) FROM generate_series(1, ?1)",
        diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, (long long)b->block);
    int rc;
    while ((rc = sl__db_step(st)) == SL__DB_ROW && b->n_ids < b->block)
        b->ids[b->n_ids++] = sl__db_column_int64(st, 0);
    sl__db_finalize(st);
    if (rc != SL__DB_DONE || b->n_ids == 0)
        return sl__store_db_error(store, diag, "number the imported measurements");
    return SL_OK;
}

/* The next measurement id, a new block of them when used up. */
static sl_status next_id(sl_store *store, long long *id, sl_diag *diag)
{
    sl__bulk *b = store->bulk;
    sl_status s = b->next_id == b->n_ids ? fetch_ids(store, diag) : SL_OK;
    if (s == SL_OK)
        *id = b->ids[b->next_id++];
    return s;
}

/* ---- an import's life ---- */

void sl__store_bulk_discard(sl_store *store)
{
    sl__bulk *b = store->bulk;
    if (!b)
        return;
    sl__db_pg_set_settle(store->db, NULL, NULL);
    if (sl__db_pg_copying(store->db))
        sl__db_pg_copy_end(store->db, "the import was abandoned");
    free(b->devices);
    free(b->ids);
    free(b->row);
    free(b);
    store->bulk = NULL;
}

/* The lot's stored devices into the key table: a device met again at
 * another die is a clash found without asking the server. */
static sl_status load_stored_devices(sl_store *store, long lot_id, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare_flags(store, &st,
        "SELECT wafer, name, die_x, die_y FROM device WHERE lot_id = ?1", SL__DB_STREAM, diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, lot_id);
    int rc;
    while (s == SL_OK && (rc = sl__db_step(st)) == SL__DB_ROW) {
        const char *wafer = sl__db_column_text(st, 0), *name = sl__db_column_text(st, 1);
        uint64_t key = key_of(lot_id, wafer ? wafer : "", name ? name : "");
        device_slot *slot = device_slot_for(store->bulk, key);
        if (!slot) {
            s = SL_ENOMEM;
            break;
        }
        if (!slot->key)
            device_fill(store->bulk, slot, key, (long)sl__db_column_int64(st, 2),
                        (long)sl__db_column_int64(st, 3));
    }
    if (s == SL_OK && rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "read the lot's devices");
    sl__db_finalize(st);
    return s;
}

sl_status sl__store_bulk_begin(sl_store *store, long lot_id, long stored_devices, sl_diag *diag)
{
    sl__store_bulk_discard(store);
    sl__bulk *b = calloc(1, sizeof *b);
    if (!b)
        return SL_ENOMEM;
    b->lot_id = lot_id;
    store->bulk = b;
    sl_status s = sl__store_exec(store, stage_create_sql, diag, "create the import staging table");
    if (s == SL_OK && stored_devices > 0)
        s = load_stored_devices(store, lot_id, diag);
    if (s != SL_OK) {
        sl__store_bulk_discard(store);
        return s;
    }
    sl__db_pg_set_settle(store->db, settle_hook, store);
    return SL_OK;
}

/* Send the row; the device and its run noted once it is out. */
static sl_status stage_row(sl_store *store, sl_store_insert *out, long lot_id, long run_id,
                           const sl_store_device *d, device_slot *slot, uint64_t key,
                           uint32_t run, sl_diag *diag)
{
    sl__bulk *b = store->bulk;
    long long id = 0;
    sl_status s = next_id(store, &id, diag);
    if (s == SL_OK)
        s = open_copy(store, diag);
    if (s != SL_OK)
        return s;
    unsigned char *blob = NULL;
    size_t bytes = 0;
    if (d->vg_V && d->n_points > 0 &&
        !(blob = sl__store_pack_sweep_memo(d->vg_V, d->r_ohm, d->n_points, d->drain_bias_V,
                                           &store->vg_memo, &bytes)))
        return SL_ENOMEM;
    int encoded = encode_row(b, id, lot_id, run_id, d, blob, bytes);
    free(blob);
    if (!encoded)
        return SL_ENOMEM;
    if (sl__db_pg_copy_put(store->db, b->row, b->row_len) != SL__DB_OK)
        return sl__store_db_error(store, diag, "send the imported devices");
    b->staged++;
    if (!slot->key)
        device_fill(b, slot, key, d->die_x, d->die_y);
    slot->runs |= run;
    out->outcome = SL_STORE_ADDED;
    out->measurement_id = (long)id;
    return SL_OK;
}

sl_status sl__store_bulk_insert(sl_store *store, int *staged, sl_store_insert *out, long lot_id,
                                long run_id, const sl_store_device *d, sl_diag *diag)
{
    sl__bulk *b = store->bulk;
    *staged = 0;
    if (lot_id != b->lot_id)
        return move_staged_or_error(store, diag);
    uint64_t key = key_of(lot_id, d->wafer, d->name);
    device_slot *slot = device_slot_for(b, key);
    if (!slot)
        return SL_ENOMEM;
    uint32_t run = run_bit(b, run_id);
    /* a device met before in the run or at another die (or one the table
     * cannot tell): the staged rows go in, and the row-by-row path finds
     * the stored measurement or die */
    int clash = slot->key && (!run || (slot->runs & run) || slot->die_x == DIE_UNKNOWN ||
                              slot->die_y == DIE_UNKNOWN || slot->die_x != d->die_x ||
                              slot->die_y != d->die_y);
    if (clash || (!slot->key && (die16(d->die_x) == DIE_UNKNOWN || die16(d->die_y) == DIE_UNKNOWN)))
        return move_staged_or_error(store, diag);
    *staged = 1;
    return stage_row(store, out, lot_id, run_id, d, slot, key, run, diag);
}

int sl__store_bulk_error(const sl_store *store, char *buf, size_t size)
{
    const sl__bulk *b = store->bulk;
    if (!b || !b->failed)
        return 0;
    snprintf(buf, size, "%s", b->error);
    return 1;
}
