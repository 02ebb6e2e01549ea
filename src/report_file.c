/* SPDX-License-Identifier: MIT
 * Atomic write of a rendered report: the text goes to "FILE.tmp", is
 * flushed to disk and renamed over FILE, so nobody ever opens half a report.
 */
#include <errno.h>
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "report_internal.h"

static int write_all(int fd, const char *text, size_t len)
{
    while (len > 0) {
        ssize_t n = write(fd, text, len);
        if (n < 0 && errno == EINTR)
            continue;
        if (n <= 0)
            return -1;
        text += n;
        len -= (size_t)n;
    }
    return 0;
}

/* Write and fsync the temporary file; errno tells why on failure. */
static int write_synced(const char *tmp_path, const char *text, size_t len)
{
    int fd = open(tmp_path, O_WRONLY | O_CREAT | O_TRUNC, 0644);
    if (fd < 0)
        return -1;
    int rc = write_all(fd, text, len) == 0 && fsync(fd) == 0 ? 0 : -1;
    int saved = errno;
    if (close(fd) != 0 && rc == 0)
        return -1;
    errno = saved;
    return rc;
}

/* Make the rename itself durable; best effort (some file systems refuse). */
static void sync_parent_dir(const char *path)
{
    const char *slash = strrchr(path, '/');
    char dir[4096];
    if (!slash)
        snprintf(dir, sizeof dir, ".");
    else if (slash == path)
        snprintf(dir, sizeof dir, "/");
    else
        snprintf(dir, sizeof dir, "%.*s", (int)(slash - path), path);
    int fd = open(dir, O_RDONLY);
    if (fd >= 0) {
        (void)fsync(fd);
        close(fd);
    }
}

sl_status sl_report_write_file(const char *path, const char *text, size_t len, sl_diag *diag)
{
    size_t n = strlen(path) + 5;
    char *tmp_path = malloc(n);
    if (!tmp_path)
        return SL_ENOMEM;
    snprintf(tmp_path, n, "%s.tmp", path);
    sl_status st = SL_OK;
    if (write_synced(tmp_path, text ? text : "", text ? len : 0) != 0) {
        sl_diag_error(diag, "cannot write '%s': %s", tmp_path,
                    strerror(errno));
        st = SL_EIO;
    } else if (rename(tmp_path, path) != 0) {
        sl_diag_error(diag, "cannot rename '%s' to '%s': %s", tmp_path,
                    path, strerror(errno));
        st = SL_EIO;
    }
    if (st != SL_OK)
        unlink(tmp_path);
    else
        sync_parent_dir(path);
    free(tmp_path);
    return st;
}
