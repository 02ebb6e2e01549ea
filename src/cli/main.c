/* SPDX-License-Identifier: MIT
 * The splitlot executable: tunes the C library's allocator for a
 * many-threaded import, then hands the arguments to the command layer.
 */
#include "cli.h"

#ifdef __GLIBC__
#include <malloc.h>
#endif

/* SQLite frees its small per-statement journals from the import's writer
 * thread; glibc would hand each such free back to the kernel (an madvise and
 * a TLB flush on every core, once per device). Keeping up to 64 MiB of freed
 * memory in the process costs nothing a command notices. */
static void keep_freed_memory(void)
{
#ifdef __GLIBC__
    mallopt(M_TRIM_THRESHOLD, 64 << 20);
#endif
}

int main(int argc, char **argv)
{
    keep_freed_memory();
    return cli_main(argc, argv);
}
