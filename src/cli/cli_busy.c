/* SPDX-License-Identifier: MIT
 * The "still working" line of long commands: once a command has run for 2 s,
 * a line on standard error says what it is doing and for how long, updated
 * twice a second, and is wiped when the work ends. Only on a terminal: a
 * pipe or a file never sees it. The import has its own line with row counts
 * (cmd_ingest.c); this one serves commands whose library call reports none.
 */
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "cli.h"

struct cli_busy {
    pthread_t thread;
    pthread_mutex_t lock;
    pthread_cond_t wake;
    int done, shown; /* done under the lock; shown by the thread, read after the join */
    char what[64];
    struct timespec start;
};

static double seconds_since(const struct timespec *t0)
{
    struct timespec now;
    clock_gettime(CLOCK_MONOTONIC, &now);
    return (double)(now.tv_sec - t0->tv_sec) + 1e-9 * (double)(now.tv_nsec - t0->tv_nsec);
}

/* Wait until the deadline or the end of the work; 1 when the work ended. */
static int wait_or_done(cli_busy *b, double after_s)
{
    struct timespec until;
    clock_gettime(CLOCK_REALTIME, &until);
    until.tv_sec += (time_t)after_s;
    until.tv_nsec += (long)((after_s - (double)(time_t)after_s) * 1e9);
    if (until.tv_nsec >= 1000000000L) {
        until.tv_sec++;
        until.tv_nsec -= 1000000000L;
    }
    pthread_mutex_lock(&b->lock);
    while (!b->done && pthread_cond_timedwait(&b->wake, &b->lock, &until) == 0)
        ;
    int done = b->done;
    pthread_mutex_unlock(&b->lock);
    return done;
}

static void *busy_thread(void *arg)
{
    cli_busy *b = arg;
    if (wait_or_done(b, 2.0))
        return NULL;
    do {
        fprintf(stderr, "\r%s: working, %.0f s ", b->what, seconds_since(&b->start));
        fflush(stderr);
        b->shown = 1;
    } while (!wait_or_done(b, 0.5));
    return NULL;
}

cli_busy *cli_busy_start(const char *what)
{
    if (!isatty(STDERR_FILENO))
        return NULL;
    cli_busy *b = calloc(1, sizeof *b);
    if (!b)
        return NULL; /* no line, the work goes on */
    snprintf(b->what, sizeof b->what, "%s", what);
    clock_gettime(CLOCK_MONOTONIC, &b->start);
    pthread_mutex_init(&b->lock, NULL);
    pthread_cond_init(&b->wake, NULL);
    if (pthread_create(&b->thread, NULL, busy_thread, b) != 0) {
        pthread_cond_destroy(&b->wake);
        pthread_mutex_destroy(&b->lock);
        free(b);
        return NULL;
    }
    return b;
}

void cli_busy_stop(cli_busy *b)
{
    if (!b)
        return;
    pthread_mutex_lock(&b->lock);
    b->done = 1;
    pthread_cond_signal(&b->wake);
    pthread_mutex_unlock(&b->lock);
    pthread_join(b->thread, NULL);
    pthread_cond_destroy(&b->wake);
    pthread_mutex_destroy(&b->lock);
    if (b->shown) { /* wipe the line so the command's own output starts clean */
        fprintf(stderr, "\r%*s\r", (int)strlen(b->what) + 24, "");
        fflush(stderr);
    }
    free(b);
}
