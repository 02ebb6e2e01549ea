/* SPDX-License-Identifier: MIT
 * The store on a PostgreSQL server.
 */
#include "store_internal.h"

sl_status sl_store_pg_setup(sl_store *store, sl_diag *diag)
{
    (void)store;
    (void)diag;
    return SL_EDB;
}
