/* SPDX-License-Identifier: MIT
 * The PostgreSQL driver of the store's database layer (see db_driver.h).
 */
#include "db_driver.h"

int sl__db_pg_open(sl__db **out, const char *url)
{
    (void)url;
    *out = 0;
    return SL__DB_FAIL;
}
