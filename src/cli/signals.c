/* signals.c - the stop and checkpoint signals of `sluice solve`, caught from
 * the first line of main(), before MPI_Init and before the model is loaded.
 *
 * The CLI's one piece of process state: what the last signal asked for, and
 * which signal it was and when it arrived (CLOCK_MONOTONIC s, us), written
 * before the flag so the solver can log both on its own clock. */
#include <signal.h>
#include <string.h>
#include <time.h>

#include "cli/cli.h"

static volatile sig_atomic_t stop_flag;
static volatile sig_atomic_t stop_info[3];

static void on_signal(int sig)
{
    struct timespec ts;
    if (clock_gettime(CLOCK_MONOTONIC, &ts) == 0) { /* async-signal-safe (POSIX) */
        stop_info[1] = (sig_atomic_t)ts.tv_sec;
        stop_info[2] = (sig_atomic_t)(ts.tv_nsec / 1000);
        stop_info[0] = sig;
    }
    if (sig == SIGUSR1) {
        if (stop_flag < 1) stop_flag = 1;
    } else {
        stop_flag = 2;
    }
}

static const int caught[] = {SIGUSR1, SIGUSR2, SIGTERM, SIGINT};

int cli_signals_install(void)
{
    struct sigaction sa;
    sigset_t set;
    memset(&sa, 0, sizeof(sa));
    sa.sa_handler = on_signal;
    sigemptyset(&sa.sa_mask);
    sigemptyset(&set);
    sa.sa_flags = SA_RESTART;
    int ok = 1;
    for (size_t k = 0; k < sizeof(caught) / sizeof(caught[0]); k++) {
        if (sigaction(caught[k], &sa, NULL) != 0) ok = 0;
        sigaddset(&set, caught[k]);
    }
    /* a mask inherited from the parent (a job script, a launcher) must not
     * hold the signals back: a pending one is delivered here, at once */
    if (sigprocmask(SIG_UNBLOCK, &set, NULL) != 0) ok = 0;
    return ok;
}

int cli_signals_intact(void)
{
    for (size_t k = 0; k < sizeof(caught) / sizeof(caught[0]); k++) {
        struct sigaction cur;
        if (sigaction(caught[k], NULL, &cur) != 0 || cur.sa_handler != on_signal) return 0;
    }
    return 1;
}

void cli_signals_attach(sl_ctx *ctx)
{
    sl_ctx_set_signal_flag(ctx, &stop_flag);
    sl_ctx_set_signal_info(ctx, stop_info);
}

int cli_signals_stop_requested(int *sig, double *arrived)
{
    if (stop_flag != 2) return 0;
    *sig = (int)stop_info[0];
    *arrived = (double)stop_info[1] + 1e-6 * (double)stop_info[2];
    return 1;
}
