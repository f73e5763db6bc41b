/* generator.c - compile, cache and load a generator; enumerate it into a model. */
#include <dlfcn.h>
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <signal.h>
#include <spawn.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "parallel/layout.h"
#include "store/store.h"

extern char **environ;
extern const unsigned char sl_generator_header[];
extern const size_t sl_generator_header_len;

#define SL_MAX_STATES ((int64_t)1 << 48)

/* ---- crash reporting --------------------------------------------------------
 * The one piece of process-wide state in the library: a signal handler can
 * only reach what is static. It is set only while a generator runs. */
static volatile sig_atomic_t crash_armed;
static volatile int64_t crash_state;
static volatile int32_t crash_action;
static char crash_name[512];

static size_t fmt_i64(char *buf, int64_t v)
{
    char tmp[24];
    size_t n = 0, k = 0;
    uint64_t u = v < 0 ? (uint64_t)(-(v + 1)) + 1 : (uint64_t)v;
    do {
        tmp[n++] = (char)('0' + u % 10);
        u /= 10;
    } while (u && n < sizeof(tmp));
    if (v < 0) buf[k++] = '-';
    while (n) buf[k++] = tmp[--n];
    return k;
}

static void crash_handler(int sig)
{
    if (crash_armed) {
        char msg[512];
        size_t k = 0;
        const char *a = "sluice: generator ";
        for (const char *p = a; *p; p++) msg[k++] = *p;
        for (const char *p = crash_name; *p && k < 300; p++) msg[k++] = *p;
        /* TERM/INT/HUP: the user stopped a generator that may loop forever */
        const char *b = (sig == SIGTERM || sig == SIGINT || sig == SIGHUP) ? " stopped (signal "
                                                                            : " crashed (signal ";
        for (const char *p = b; *p; p++) msg[k++] = *p;
        k += fmt_i64(msg + k, sig);
        const char *c = ") while generating state ";
        for (const char *p = c; *p; p++) msg[k++] = *p;
        k += fmt_i64(msg + k, crash_state);
        if (crash_action >= 0) {
            const char *d = ", action ";
            for (const char *p = d; *p; p++) msg[k++] = *p;
            k += fmt_i64(msg + k, crash_action);
        } else { /* sluice_terminal_value */
            const char *d = "'s terminal value";
            for (const char *p = d; *p; p++) msg[k++] = *p;
        }
        const char *e = "; no model written\n";
        for (const char *p = e; *p; p++) msg[k++] = *p;
        ssize_t w = write(STDERR_FILENO, msg, k);
        (void)w;
        _exit(SL_EDATA);
    }
    signal(sig, SIG_DFL);
    raise(sig);
}

/* ---- compile and cache -------------------------------------------------------- */

static uint64_t hash_bytes(uint64_t h, const void *data, size_t n)
{
    const unsigned char *p = data;
    for (size_t i = 0; i < n; i++) h = (h ^ p[i]) * 0x100000001b3ULL; /* FNV-1a */
    return h;
}

static sl_status read_file(sl_ctx *ctx, const char *path, char **out, size_t *len)
{
    *out = NULL;
    FILE *f = fopen(path, "rb");
    if (f == NULL) return SL_ERR(ctx, SL_ENOINPUT, "%s: %s", path, strerror(errno));
    sl_status st = SL_OK;
    char *buf = NULL;
    size_t cap = 0, n = 0;
    for (;;) {
        if (n + 65536 > cap) {
            cap = cap ? cap * 2 : 131072;
            char *nb = realloc(buf, cap);
            if (nb == NULL) {
                st = SL_ERR(ctx, SL_ENOMEM, "%s: out of memory reading", path);
                break;
            }
            buf = nb;
        }
        size_t r = fread(buf + n, 1, cap - n - 1, f);
        n += r;
        if (r == 0) break;
    }
    if (st == SL_OK && ferror(f)) st = SL_ERR(ctx, SL_ENOINPUT, "%s: read error", path);
    fclose(f);
    if (st != SL_OK) {
        free(buf);
        return st;
    }
    buf[n] = '\0';
    *out = buf;
    *len = n;
    return SL_OK;
}

static sl_status mkdirs(sl_ctx *ctx, const char *dir)
{
    char buf[4096];
    snprintf(buf, sizeof(buf), "%s", dir);
    for (char *p = buf + 1; *p; p++) {
        if (*p == '/') {
            *p = '\0';
            if (mkdir(buf, 0755) != 0 && errno != EEXIST)
                return SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create directory: %s", buf, strerror(errno));
            *p = '/';
        }
    }
    if (mkdir(buf, 0755) != 0 && errno != EEXIST)
        return SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot create directory: %s", buf, strerror(errno));
    return SL_OK;
}

/* Write bytes to path atomically unless identical content is already there. */
static sl_status write_if_changed(sl_ctx *ctx, const char *path, const void *data, size_t n)
{
    char *old = NULL;
    size_t oldn = 0;
    FILE *f = fopen(path, "rb");
    if (f != NULL) {
        fclose(f);
        sl_ctx quiet = *ctx;
        if (read_file(&quiet, path, &old, &oldn) == SL_OK && oldn == n && memcmp(old, data, n) == 0) {
            free(old);
            return SL_OK;
        }
        free(old);
    }
    char tmp[4200];
    int w = snprintf(tmp, sizeof(tmp), "%s.%ld.tmp", path, (long)getpid());
    if (w < 0 || (size_t)w >= sizeof(tmp)) return SL_ERR(ctx, SL_EUSAGE, "%s: path too long", path);
    f = fopen(tmp, "wb");
    if (f == NULL) return SL_ERR(ctx, SL_ECANTCREAT, "%s: %s", tmp, strerror(errno));
    int bad = fwrite(data, 1, n, f) != n;
    bad |= fclose(f) != 0;
    if (bad || rename(tmp, path) != 0) {
        unlink(tmp);
        return SL_ERR(ctx, SL_ECANTCREAT, "%s: cannot write", path);
    }
    return SL_OK;
}

static sl_status cache_dir(sl_ctx *ctx, const char *given, char *out, size_t n)
{
    const char *env = getenv("SLUICE_CACHE");
    const char *xdg = getenv("XDG_CACHE_HOME");
    const char *home = getenv("HOME");
    if (given) snprintf(out, n, "%s", given);
    else if (env && *env) snprintf(out, n, "%s", env);
    else if (xdg && *xdg) snprintf(out, n, "%s/sluice", xdg);
    else if (home && *home) snprintf(out, n, "%s/.cache/sluice", home);
    else snprintf(out, n, "/tmp/sluice-cache-%ld", (long)getuid());
    return mkdirs(ctx, out);
}

/* Compile `src` into a cached shared object; rank 0 only. */
static sl_status compile_generator(sl_ctx *ctx, const sl_build_opts *o, char *so_path, size_t n)
{
    sl_status st = SL_OK;
    char *src = NULL;
    size_t len = 0;
    char dir[4096], inc[4200], hdr[4300], log[4300], tmp[4400];
    const char *cc = o->cc ? o->cc : (getenv("CC") && *getenv("CC") ? getenv("CC") : "cc");
    SL_TRY(read_file(ctx, o->generator, &src, &len));
    SL_TRY(cache_dir(ctx, o->cache_dir, dir, sizeof(dir)));
    uint64_t h = 0xcbf29ce484222325ULL;
    h = hash_bytes(h, src, len);
    h = hash_bytes(h, sl_generator_header, sl_generator_header_len);
    h = hash_bytes(h, cc, strlen(cc));
    int abi = SLUICE_GENERATOR_ABI;
    h = hash_bytes(h, &abi, sizeof(abi));
    snprintf(inc, sizeof(inc), "%s/include/sluice", dir);
    SL_TRY(mkdirs(ctx, inc));
    snprintf(inc, sizeof(inc), "%s/include", dir);
    snprintf(hdr, sizeof(hdr), "%s/include/sluice/generator.h", dir);
    SL_TRY(write_if_changed(ctx, hdr, sl_generator_header, sl_generator_header_len));
    snprintf(so_path, n, "%s/gen-abi%d-%016llx.so", dir, abi, (unsigned long long)h);
    if (access(so_path, R_OK) == 0) {
        sl_log(ctx, "build: using cached %s", so_path);
        goto cleanup;
    }
    snprintf(tmp, sizeof(tmp), "%s.%ld.tmp", so_path, (long)getpid());
    snprintf(log, sizeof(log), "%s.%ld.log", so_path, (long)getpid());
    char incflag[4300];
    snprintf(incflag, sizeof(incflag), "-I%s", inc);
    char *argv[] = {(char *)cc, "-std=c11", "-O2", "-fPIC", "-shared", "-Wall", incflag,
                    "-o", tmp, (char *)o->generator, "-lm", NULL};
    posix_spawn_file_actions_t fa;
    posix_spawn_file_actions_init(&fa);
    posix_spawn_file_actions_addopen(&fa, STDOUT_FILENO, log, O_WRONLY | O_CREAT | O_TRUNC, 0644);
    posix_spawn_file_actions_adddup2(&fa, STDOUT_FILENO, STDERR_FILENO);
    pid_t pid;
    sl_log(ctx, "build: compiling %s with %s", o->generator, cc);
    int rc = posix_spawnp(&pid, cc, &fa, NULL, argv, environ);
    posix_spawn_file_actions_destroy(&fa);
    if (rc != 0) {
        unlink(log);
        SL_FAIL(SL_EUSAGE, "cannot run the C compiler '%s': %s (install gcc, or set CC)", cc, strerror(rc));
    }
    int wst = 0;
    while (waitpid(pid, &wst, 0) < 0 && errno == EINTR) {}
    if (!WIFEXITED(wst) || WEXITSTATUS(wst) != 0) {
        char *msg = NULL;
        size_t ml = 0;
        sl_ctx quiet = *ctx;
        if (read_file(&quiet, log, &msg, &ml) == SL_OK && ctx->rank == 0) fputs(msg, stderr);
        free(msg);
        unlink(log);
        unlink(tmp);
        SL_FAIL(SL_EDATA, "%s: the generator does not compile (compiler output above)", o->generator);
    }
    unlink(log);
    if (rename(tmp, so_path) != 0) {
        unlink(tmp);
        SL_FAIL(SL_ECANTCREAT, "%s: cannot store compiled generator: %s", so_path, strerror(errno));
    }
cleanup:
    free(src);
    return st;
}

/* ---- enumeration ---------------------------------------------------------------- */

typedef struct sink_state {
    sluice_sink sink;
    sl_ctx *ctx;
    sl_block *block;
    sl_status st;
    int64_t n_pair;    /* successors emitted for the current pair */
    int64_t state;     /* the current pair, for messages */
    int32_t action;
    const char *where;
} sink_state;

/* A pair has at most n_states distinct successors; a generator that emits
 * more than this many for one pair is taken to be running away (a loop that
 * never ends, a wrong bound) and is stopped before it exhausts memory. */
#define SL_MAX_SUCCESSORS_PER_PAIR ((int64_t)1 << 24)

static int sink_emit(sluice_sink *sink, int64_t next, double p, double r)
{
    sink_state *s = sink->opaque;
    if (s->st != SL_OK) return 1;
    if (s->block->nq > 0) {
        s->st = SL_ERR(s->ctx, SL_EDATA,
                       "%s: state %lld, action %d: sluice_emit() without quantities, but the generator declares "
                       "%d outcome quantities (use sluice_emit_outcome)",
                       s->where, (long long)s->state, (int)s->action, s->block->nq);
        return 1;
    }
    if (++s->n_pair > SL_MAX_SUCCESSORS_PER_PAIR) {
        s->st = SL_ERR(s->ctx, SL_EDATA,
                       "%s: state %lld, action %d: the generator emitted more than %lld successors for one pair; "
                       "stopped (a runaway loop?)",
                       s->where, (long long)s->state, (int)s->action, (long long)SL_MAX_SUCCESSORS_PER_PAIR);
        return 1;
    }
    s->st = sl_block_add(s->ctx, s->block, next, p, r);
    return s->st != SL_OK;
}

static int sink_emit_outcome(sluice_sink *sink, int64_t next, double p, double r, const double *q)
{
    sink_state *s = sink->opaque;
    if (s->st != SL_OK) return 1;
    if (++s->n_pair > SL_MAX_SUCCESSORS_PER_PAIR) {
        s->st = SL_ERR(s->ctx, SL_EDATA,
                       "%s: state %lld, action %d: the generator emitted more than %lld successors for one pair; "
                       "stopped (a runaway loop?)",
                       s->where, (long long)s->state, (int)s->action, (long long)SL_MAX_SUCCESSORS_PER_PAIR);
        return 1;
    }
    s->st = s->block->nq > 0 ? sl_block_add_outcome(s->ctx, s->block, next, p, r, q)
                             : sl_block_add(s->ctx, s->block, next, p, r);
    return s->st != SL_OK;
}

/* A name usable in a file path and on the command line. */
static int is_identifier(const char *s)
{
    if (s == NULL || s[0] == '\0' || strlen(s) >= SL_NAME_MAX) return 0;
    for (const char *p = s; *p; p++)
        if (!((*p >= 'a' && *p <= 'z') || (*p >= 'A' && *p <= 'Z') || (*p >= '0' && *p <= '9') || *p == '_'))
            return 0;
    return 1;
}

static int short_text(const char *s) { return s == NULL || strlen(s) < SL_NAME_MAX; }

static int cmp_label(const void *a, const void *b) { return strcmp(*(const char *const *)a, *(const char *const *)b); }

/* Copy and check the ABI 2 annotations of `shape` into `meta` (rank-local;
 * every rank runs the same init, so all reach the same verdict). */
static sl_status take_annotations(sl_ctx *ctx, const sluice_shape *sh, sl_meta *meta, const char *gen)
{
    sl_status st = SL_OK;
    const char **sorted = NULL;
    for (int f = 0; f < sh->n_factors; f++) {
        const sluice_factor_values *fv = &sh->factor_values[f];
        int64_t n = sh->factors[f].size;
        if (!fv->values && !fv->labels && !fv->unit) continue;
        if (!is_identifier(sh->factors[f].name))
            SL_FAIL(SL_EDATA, "%s: factor %d name \"%s\" must be an identifier (letters, digits, _) under %d chars",
                    gen, f, sh->factors[f].name ? sh->factors[f].name : "", SL_NAME_MAX);
        if (!short_text(fv->unit))
            SL_FAIL(SL_EDATA, "%s: factor %s: unit longer than %d characters", gen, sh->factors[f].name,
                    SL_NAME_MAX - 1);
        /* the file keeps a unit with the values only (attr of /factor/NAME/value) */
        snprintf(meta->factor_unit[f], SL_NAME_MAX, "%s", fv->unit && fv->values ? fv->unit : "");
        if (fv->values) {
            if (n > INT32_MAX) SL_FAIL(SL_EDATA, "%s: factor %s: too many values", gen, sh->factors[f].name);
            if (SL_ALLOC(ctx, meta->factor_value[f], n, "factor values") == NULL) SL_TRY(SL_ENOMEM); /* the allocator recorded the message */
            for (int64_t i = 0; i < n; i++) {
                if (!isfinite(fv->values[i]))
                    SL_FAIL(SL_EDATA, "%s: factor %s: value of index %lld is not finite", gen, sh->factors[f].name,
                            (long long)i);
                meta->factor_value[f][i] = fv->values[i];
            }
        }
        if (fv->labels) {
            if (n > INT32_MAX / SL_NAME_MAX) SL_FAIL(SL_EDATA, "%s: factor %s: too many labels", gen,
                                                     sh->factors[f].name);
            if (SL_ZALLOC(ctx, meta->factor_label[f], n, "factor labels") == NULL ||
                SL_ALLOC(ctx, sorted, n, "labels") == NULL)
                SL_TRY(SL_ENOMEM); /* the allocator recorded the message */
            for (int64_t i = 0; i < n; i++) {
                const char *l = fv->labels[i];
                if (l == NULL || l[0] == '\0' || !short_text(l) || strpbrk(l, ",=@\"\n") != NULL)
                    SL_FAIL(SL_EDATA,
                            "%s: factor %s: label of index %lld is empty, longer than %d characters or holds one "
                            "of , = @ \" or a newline",
                            gen, sh->factors[f].name, (long long)i, SL_NAME_MAX - 1);
                snprintf(meta->factor_label[f][i], SL_NAME_MAX, "%s", l);
                sorted[i] = l;
            }
            qsort(sorted, (size_t)n, sizeof(*sorted), cmp_label);
            for (int64_t i = 1; i < n; i++)
                if (strcmp(sorted[i - 1], sorted[i]) == 0)
                    SL_FAIL(SL_EDATA, "%s: factor %s: label \"%s\" is used twice", gen, sh->factors[f].name,
                            sorted[i]);
            free(sorted);
            sorted = NULL;
        }
    }
    if (sh->action_values) {
        if (SL_ALLOC(ctx, meta->action_value, sh->n_actions, "action values") == NULL)
            SL_TRY(SL_ENOMEM); /* the allocator recorded the message */
        meta->n_action_values = sh->n_actions;
        for (int32_t a = 0; a < sh->n_actions; a++) {
            if (!isfinite(sh->action_values[a]))
                SL_FAIL(SL_EDATA, "%s: value of action %d is not finite", gen, (int)a);
            meta->action_value[a] = sh->action_values[a];
        }
    }
    if (!short_text(sh->action_unit) || !short_text(sh->reward_unit) || !short_text(sh->period_unit))
        SL_FAIL(SL_EDATA, "%s: a unit (action, reward or period) is longer than %d characters", gen, SL_NAME_MAX - 1);
    snprintf(meta->action_unit, SL_NAME_MAX, "%s", sh->action_unit && sh->action_values ? sh->action_unit : "");
    snprintf(meta->reward_unit, SL_NAME_MAX, "%s", sh->reward_unit ? sh->reward_unit : "");
    snprintf(meta->period_unit, SL_NAME_MAX, "%s", sh->period_unit ? sh->period_unit : "");
    if (sh->n_quantities < 0 || sh->n_quantities > SLUICE_MAX_QUANTITIES ||
        (sh->n_quantities > 0 && sh->quantities == NULL))
        SL_FAIL(SL_EDATA, "%s: %d outcome quantities (0 to %d, with a table)", gen, sh->n_quantities,
                SLUICE_MAX_QUANTITIES);
    for (int q = 0; q < sh->n_quantities; q++) {
        const char *nm = sh->quantities[q].name;
        if (!is_identifier(nm))
            SL_FAIL(SL_EDATA, "%s: quantity %d name \"%s\" must be an identifier (letters, digits, _) under %d chars",
                    gen, q, nm ? nm : "", SL_NAME_MAX);
        if (strcmp(nm, "action") == 0 || strcmp(nm, "value") == 0 || strcmp(nm, "switch") == 0)
            SL_FAIL(SL_EDATA, "%s: quantity name \"%s\" is reserved (a --show keyword)", gen, nm);
        for (int r = 0; r < q; r++)
            if (strcmp(nm, meta->quantity_name[r]) == 0)
                SL_FAIL(SL_EDATA, "%s: quantity \"%s\" is declared twice", gen, nm);
        if (!short_text(sh->quantities[q].unit))
            SL_FAIL(SL_EDATA, "%s: quantity %s: unit longer than %d characters", gen, nm, SL_NAME_MAX - 1);
        snprintf(meta->quantity_name[q], SL_NAME_MAX, "%s", nm);
        snprintf(meta->quantity_unit[q], SL_NAME_MAX, "%s", sh->quantities[q].unit ? sh->quantities[q].unit : "");
    }
    meta->n_quantities = sh->n_quantities;
cleanup:
    free(sorted);
    return st;
}

static int ends_with(const char *s, const char *suf)
{
    size_t a = strlen(s), b = strlen(suf);
    return a >= b && strcmp(s + a - b, suf) == 0;
}

static void progress(sl_ctx *ctx, const char *what, double t0, double *last, int64_t done, int64_t total, int final)
{
    if (ctx->rank != 0 || ctx->verbosity < 1 || ctx->log == NULL) return;
    double now = sl_now(), every = ctx->log_tty ? 0.5 : 10.0;
    if (!final && now - *last < every) return;
    *last = now;
    double rate = done / (now - t0 + 1e-9);
    double eta = rate > 0 ? (total - done) / rate : 0;
    if (ctx->log_tty)
        fprintf(ctx->log, "\rbuild: %s%lld/%lld states (rank 0), %.0f states/s, ETA %.0f s   %s", what,
                (long long)done, (long long)total, rate, eta, final ? "\n" : "");
    else
        fprintf(ctx->log, "build: %s%lld/%lld states (rank 0), %.0f states/s, ETA %.0f s\n", what, (long long)done,
                (long long)total, rate, eta);
    fflush(ctx->log);
}

/* Compile (rank 0, cached) and load a generator on every rank; check its
 * ABI and definition. On success *dl and *gp are set (dlclose *dl). */
static sl_status load_generator(sl_ctx *ctx, const sl_build_opts *o, char *so_path, size_t so_len, void **dlp,
                                const sluice_generator_def **gp)
{
    sl_status st = SL_OK;
    void *dl = NULL;
    const sluice_generator_def *g = NULL;
    (void)so_len;
    if (ctx->rank == 0) {
        if (access(o->generator, R_OK) != 0)
            st = SL_ERR(ctx, SL_ENOINPUT, "%s: %s", o->generator, strerror(errno));
        else if (ends_with(o->generator, ".so"))
            snprintf(so_path, so_len, "%s", o->generator);
        else if (ends_with(o->generator, ".c"))
            st = compile_generator(ctx, o, so_path, so_len);
        else
            st = SL_ERR(ctx, SL_EUSAGE, "%s: a generator is a .c source or a compiled .so", o->generator);
    }
    SL_TRY(sl_agree(ctx, st));
    MPI_Bcast(so_path, (int)so_len, MPI_CHAR, 0, ctx->comm);

    /* load: every rank (a shared file system is assumed for the cache) */
    if (strchr(so_path, '/') == NULL) {
        size_t len = strlen(so_path);
        if (len + 3 > so_len) SL_FAIL(SL_EUSAGE, "%s: path too long", so_path);
        memmove(so_path + 2, so_path, len + 1);
        so_path[0] = '.';
        so_path[1] = '/';
    }
    dl = dlopen(so_path, RTLD_NOW | RTLD_LOCAL);
    if (dl == NULL) {
        st = SL_ERR(ctx, SL_EDATA, "%s: cannot load generator: %s", o->generator, dlerror());
    } else {
        g = (const sluice_generator_def *)dlsym(dl, "sluice_generator");
        if (g == NULL)
            st = SL_ERR(ctx, SL_EDATA, "%s: no symbol 'sluice_generator' (see sluice/generator.h)", o->generator);
        else if (g->abi_version < 1 || g->abi_version > SLUICE_GENERATOR_ABI)
            st = SL_ERR(ctx, SL_EDATA, "%s: generator ABI %d, this sluice implements ABIs 1 to %d", o->generator,
                        g->abi_version, SLUICE_GENERATOR_ABI);
        else if (g->init == NULL || g->transitions == NULL || g->n_params < 0 || (g->n_params > 0 && !g->params))
            st = SL_ERR(ctx, SL_EDATA, "%s: generator definition is incomplete (init/transitions missing)",
                        o->generator);
    }
    SL_TRY(sl_agree(ctx, st));

cleanup:
    if (st != SL_OK && dl) {
        dlclose(dl);
        dl = NULL;
    }
    *dlp = dl;
    *gp = g;
    return st;
}

/* A generator loaded, initialised and checked, with the model's metadata
 * (all but the counts and the fingerprint) and the crash handler armed. */
typedef struct gen_session {
    const sl_build_opts *o;
    void *dl, *inst;
    const sluice_generator_def *g;
    double *pv;
    sluice_shape shape;
    sl_meta meta;
    struct sigaction old[8];
    int armed;
    int64_t s0, s1;             /* this rank's states */
    double t0, last;            /* progress */
    int (*terminal)(const void *, int64_t, double *); /* sluice_terminal_value, finite only */
} gen_session;

static const int gen_signals[8] = {SIGSEGV, SIGBUS, SIGFPE, SIGILL, SIGABRT, SIGTERM, SIGINT, SIGHUP};

static void gen_close(gen_session *gs)
{
    if (gs->armed)
        for (int i = 0; i < 8; i++) sigaction(gen_signals[i], &gs->old[i], NULL);
    gs->armed = 0;
    crash_armed = 0;
    if (gs->inst && gs->g && gs->g->finish) gs->g->finish(gs->inst);
    gs->inst = NULL;
    if (gs->dl) dlclose(gs->dl);
    gs->dl = NULL;
    free(gs->pv);
    gs->pv = NULL;
    sl_meta_free(&gs->meta);
}

/* Load the generator, set its parameters, run its init, check its shape and
 * fill gs->meta. Collective. On failure gen_close(gs) still has to be
 * called. */
static sl_status gen_open(sl_ctx *ctx, const sl_build_opts *o, gen_session *gs)
{
    sl_status st = SL_OK;
    char so_path[4400] = "";
    sl_meta *meta = &gs->meta;
    sluice_shape *sh = &gs->shape;
    memset(gs, 0, sizeof(*gs));
    gs->o = o;
    if (o == NULL || o->generator == NULL) return SL_ERR(ctx, SL_EUSAGE, "sl_model_from_generator: no generator given");

    SL_TRY(load_generator(ctx, o, so_path, sizeof(so_path), &gs->dl, &gs->g));
    const sluice_generator_def *g = gs->g;

    /* parameters */
    if (SL_ALLOC(ctx, gs->pv, g->n_params, "parameters") == NULL) st = SL_ENOMEM;
    for (int i = 0; st == SL_OK && i < g->n_params; i++) gs->pv[i] = g->params[i].default_value;
    for (int j = 0; st == SL_OK && j < o->n_params; j++) {
        int found = -1;
        for (int i = 0; i < g->n_params; i++)
            if (strcmp(g->params[i].name, o->param_names[j]) == 0) found = i;
        if (found < 0) {
            char names[1024] = "";
            for (int i = 0; i < g->n_params; i++) {
                strncat(names, i ? ", " : "", sizeof(names) - strlen(names) - 1);
                strncat(names, g->params[i].name, sizeof(names) - strlen(names) - 1);
            }
            st = SL_ERR(ctx, SL_EUSAGE, "%s: unknown parameter '%s' (this generator has: %s)", o->generator,
                        o->param_names[j], g->n_params ? names : "no parameters");
        } else {
            gs->pv[found] = o->param_values[j];
        }
    }
    SL_TRY(sl_agree(ctx, st));

    char err[512] = "";
    int rc = g->init(gs->pv, sh, &gs->inst, err, sizeof(err));
    if (rc != 0)
        st = SL_ERR(ctx, SL_EDATA, "%s: generator init failed (code %d): %s", o->generator, rc,
                    err[0] ? err : "no message");
    SL_TRY(sl_agree(ctx, st));

    /* shape checks: factor sizes first, so an overflowing product is not
     * mistaken for an empty model */
    if (sh->n_factors < 0 || sh->n_factors > SLUICE_MAX_FACTORS)
        st = SL_ERR(ctx, SL_EDATA, "%s: %d factors (at most %d)", o->generator, sh->n_factors,
                    SLUICE_MAX_FACTORS);
    if (st == SL_OK && sh->n_factors > 0) {
        int64_t prod = 1;
        for (int f = 0; f < sh->n_factors && st == SL_OK; f++) {
            int64_t sz = sh->factors[f].size;
            if (sz < 1)
                st = SL_ERR(ctx, SL_EDATA, "%s: factor %d has size %lld", o->generator, f, (long long)sz);
            else if (prod > INT64_MAX / sz)
                st = SL_ERR(ctx, SL_EDATA, "%s: factor sizes overflow the state count (factor %d)", o->generator,
                            f);
            else prod *= sz;
        }
        if (st == SL_OK && prod != sh->n_states)
            st = SL_ERR(ctx, SL_EDATA, "%s: factor sizes multiply to %lld but the generator declares %lld states",
                        o->generator, (long long)prod, (long long)sh->n_states);
    }
    if (st == SL_OK && sh->n_states <= 0)
        st = SL_ERR(ctx, SL_EDATA, "%s: the generator declares %lld states: the model is empty", o->generator,
                    (long long)sh->n_states);
    else if (st == SL_OK && sh->n_states > SL_MAX_STATES)
        st = SL_ERR(ctx, SL_EDATA, "%s: state count %lld overflows the supported range (at most 2^48)",
                    o->generator, (long long)sh->n_states);
    else if (st == SL_OK && sh->n_actions <= 0)
        st = SL_ERR(ctx, SL_EDATA, "%s: the generator declares no actions", o->generator);
    double gamma = o->have_discount ? o->discount : sh->discount;
    if (st == SL_OK && o->objective == SL_OBJ_DISCOUNTED && !(gamma >= 0.0 && gamma < 1.0))
        st = SL_ERR(ctx, SL_EUSAGE, "discount %g is not in [0, 1) (required for the discounted objective)", gamma);
    if (st == SL_OK && o->objective != SL_OBJ_DISCOUNTED && !(gamma > 0.0 && gamma <= 1.0))
        st = SL_ERR(ctx, SL_EUSAGE, "discount %g is not in (0, 1]", gamma);
    SL_TRY(sl_agree(ctx, st));
    /* ABI 2 annotations: an ABI 1 object never writes the fields after
     * `discount`, which stay zero from the memset above */
    if (g->abi_version >= 2) st = take_annotations(ctx, sh, meta, o->generator);
    SL_TRY(sl_agree(ctx, st));

    /* optional terminal values (finite objective only) */
    void *tsym = dlsym(gs->dl, SLUICE_TERMINAL_VALUE_SYMBOL);
    if (tsym != NULL && o->objective != SL_OBJ_FINITE)
        sl_log(ctx, "build: %s exports %s; terminal values apply to the finite objective only, not stored",
               o->generator, SLUICE_TERMINAL_VALUE_SYMBOL);
    else if (tsym != NULL) {
        memcpy(&gs->terminal, &tsym, sizeof(gs->terminal)); /* object to function pointer, as POSIX dlsym requires */
        meta->has_terminal = 1;
    }

    /* metadata but the counts and fingerprint */
    int64_t n = sh->n_states;
    gs->s0 = n * ctx->rank / ctx->size;
    gs->s1 = n * (ctx->rank + 1) / ctx->size;
    meta->format_version = sl_meta_has_annotations(meta) ? 2 : 1;
    meta->n_states = n;
    meta->discount = gamma;
    meta->objective = o->objective;
    meta->n_factors = sh->n_factors;
    for (int f = 0; f < sh->n_factors; f++) {
        snprintf(meta->factor_name[f], SL_NAME_MAX, "%s", sh->factors[f].name ? sh->factors[f].name : "");
        meta->factor_size[f] = sh->factors[f].size;
        meta->factor_stage[f] = sh->factors[f].stage != 0;
    }
    meta->n_action_names = sh->action_names ? sh->n_actions : 0;
    meta->n_params = g->n_params;
    if (SL_ZALLOC(ctx, meta->action_name, meta->n_action_names, "action names") == NULL ||
        SL_ZALLOC(ctx, meta->param_name, meta->n_params, "params") == NULL ||
        SL_ZALLOC(ctx, meta->param_unit, meta->n_params, "params") == NULL ||
        SL_ZALLOC(ctx, meta->param_value, meta->n_params, "params") == NULL)
        st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int32_t a = 0; a < meta->n_action_names; a++)
        snprintf(meta->action_name[a], SL_NAME_MAX, "%s", sh->action_names[a] ? sh->action_names[a] : "");
    for (int i = 0; i < g->n_params; i++) {
        snprintf(meta->param_name[i], SL_NAME_MAX, "%s", g->params[i].name);
        snprintf(meta->param_unit[i], SL_NAME_MAX, "%s", g->params[i].unit ? g->params[i].unit : "");
        meta->param_value[i] = gs->pv[i];
    }
    snprintf(meta->generator, sizeof(meta->generator), "%s", g->name ? g->name : "generator");
    const char *base = strrchr(o->generator, '/');
    snprintf(meta->source, sizeof(meta->source), "%s", base ? base + 1 : o->generator);

    if (snprintf(crash_name, sizeof(crash_name), "%s (%s)", g->name ? g->name : "?", o->generator) >=
        (int)sizeof(crash_name))
        crash_name[sizeof(crash_name) - 1] = '\0'; /* a shortened name is fine */
    struct sigaction sa;
    memset(&sa, 0, sizeof(sa));
    sa.sa_handler = crash_handler;
    sigemptyset(&sa.sa_mask);
    for (int i = 0; i < 8; i++) sigaction(gen_signals[i], &sa, &gs->old[i]);
    gs->armed = 1;
cleanup:
    return st;
}

/* An empty block for this rank's rows, set up as the generator's settings
 * say. Local. */
static sl_status gen_block(sl_ctx *ctx, gen_session *gs, sl_block *blk)
{
    sl_status st = sl_block_init(ctx, blk, gs->s0, gs->meta.n_states, gs->o->generator);
    if (st == SL_OK) st = sl_block_set_quantities(ctx, blk, gs->meta.n_quantities);
    blk->prob_tolerance = gs->o->prob_tolerance > 0 ? gs->o->prob_tolerance : 1e-9;
    blk->renormalize = gs->o->renormalize;
    return st;
}

/* The generator's optional sluice_terminal_value (generator.h): for the
 * finite objective, the terminal value of every state of the block's rows
 * into blk->terminal (meta->has_terminal was set by gen_open, so the
 * fingerprint covers them); for other objectives it is not called. Every
 * rank loads the same object, so all agree on whether it exists. Local. */
static sl_status gen_terminal_values(sl_ctx *ctx, gen_session *gs, sl_block *blk)
{
    int64_t ns = blk->s_end - blk->s_begin;
    if (gs->terminal == NULL) return SL_OK;
    free(blk->terminal);
    if (SL_ALLOC(ctx, blk->terminal, ns + 1, "terminal values") == NULL) return SL_ENOMEM;
    crash_action = -1;
    for (int64_t s = blk->s_begin; s < blk->s_end; s++) {
        double v = NAN;
        crash_state = s;
        int rc = gs->terminal(gs->inst, s, &v);
        if (rc != 0)
            return SL_ERR(ctx, SL_EDATA, "%s: %s returned error %d at state %lld", gs->o->generator,
                          SLUICE_TERMINAL_VALUE_SYMBOL, rc, (long long)s);
        if (!isfinite(v))
            return SL_ERR(ctx, SL_EDATA, "%s: %s gave %g at state %lld (a terminal value must be a finite number)",
                          gs->o->generator, SLUICE_TERMINAL_VALUE_SYMBOL, v, (long long)s);
        blk->terminal[s - blk->s_begin] = v;
    }
    return SL_OK;
}

/* Enumerate states from blk->s_end on into blk, up to state `upto` or until
 * the block holds `max_trans` transitions (0: no limit). Local. */
static sl_status gen_rows(sl_ctx *ctx, gen_session *gs, sl_block *blk, int64_t upto, int64_t max_trans,
                          const char *what)
{
    sl_status st = SL_OK;
    const sluice_generator_def *g = gs->g;
    sink_state sk = {{sink_emit, NULL, sink_emit_outcome}, ctx, blk, SL_OK, 0, 0, 0, gs->o->generator};
    sk.sink.opaque = &sk;
    crash_armed = 1;
    for (int64_t s = blk->s_end; s < upto && st == SL_OK; s++) {
        st = sl_block_begin_state(ctx, blk);
        for (int32_t a = 0; a < gs->shape.n_actions && st == SL_OK; a++) {
            crash_state = s;
            crash_action = a;
            if (g->available && !g->available(gs->inst, s, a)) continue;
            st = sl_block_begin_pair(ctx, blk, a);
            if (st != SL_OK) break;
            sk.n_pair = 0;
            sk.state = s;
            sk.action = a;
            int grc = g->transitions(gs->inst, s, a, &sk.sink);
            if (sk.st != SL_OK) st = sk.st;
            else if (grc != 0)
                st = SL_ERR(ctx, SL_EDATA, "%s: generator returned error %d at state %lld, action %d",
                            gs->o->generator, grc, (long long)s, (int)a);
            if (st == SL_OK) st = sl_block_end_pair(ctx, blk);
        }
        if (st == SL_OK) st = sl_block_end_state(ctx, blk);
        if (((s - gs->s0) & 1023) == 0) progress(ctx, what, gs->t0, &gs->last, s - gs->s0, gs->s1 - gs->s0, 0);
        if (max_trans > 0 && sl_block_trans(blk) >= max_trans) break;
    }
    /* optional terminal values (finite objective): one call per state of the block */
    if (st == SL_OK) st = gen_terminal_values(ctx, gs, blk);
    crash_armed = 0;
    return st;
}

static void gen_report_renormalized(sl_ctx *ctx, gen_session *gs, const sl_block *blk)
{
    if (blk->n_renormalized > 0 || gs->o->renormalize) {
        int64_t tot = sl_sum_i64(ctx, blk->n_renormalized);
        sl_warn(ctx, "--renormalize rescaled %lld pair(s) whose probabilities drifted from 1", (long long)tot);
    }
}

sl_status sl_model_from_generator_opts(sl_ctx *ctx, const sl_build_opts *o, sl_model **out)
{
    sl_status st = SL_OK;
    gen_session gs;
    sl_block blk;
    memset(&gs, 0, sizeof(gs));
    memset(&blk, 0, sizeof(blk));
    if (out == NULL) return SL_ERR(ctx, SL_EUSAGE, "sl_model_from_generator: no output handle");
    *out = NULL;
    SL_TRY(gen_open(ctx, o, &gs));
    st = gen_block(ctx, &gs, &blk);
    SL_TRY(sl_agree(ctx, st));
    gs.t0 = gs.last = sl_now();
    st = gen_rows(ctx, &gs, &blk, gs.s1, 0, "");
    if (st == SL_OK) progress(ctx, "", gs.t0, &gs.last, gs.s1 - gs.s0, gs.s1 - gs.s0, 1);
    SL_TRY(sl_agree(ctx, st));
    gen_report_renormalized(ctx, &gs, &blk);

    /* global offsets, counts, fingerprint */
    sl_block_rebase(&blk, sl_exscan_i64(ctx, sl_block_pairs(&blk)), sl_exscan_i64(ctx, sl_block_trans(&blk)));
    gs.meta.n_pairs = sl_sum_i64(ctx, sl_block_pairs(&blk));
    gs.meta.n_trans = sl_sum_i64(ctx, sl_block_trans(&blk));
    SL_TRY(sl_fingerprint(ctx, &gs.meta, &blk, gs.meta.fingerprint));
    sl_log(ctx, "build: %s: %lld states, %lld pairs, %lld transitions enumerated in %.1f s", o->generator,
           (long long)gs.meta.n_states, (long long)gs.meta.n_pairs, (long long)gs.meta.n_trans, sl_now() - gs.t0);
    SL_TRY(sl_model_adopt(ctx, &gs.meta, &blk, out));
cleanup:
    gen_close(&gs);
    sl_block_free(&blk);
    return st;
}

/* Transitions per block of a streamed build: the rows of one block, and
 * one stream's copy of them, are what the build holds (about 16 + 12 bytes
 * per transition of the block). */
#define SL_BUILD_BLOCK_TRANS ((int64_t)1 << 21)

sl_status sl_build_to_file(sl_ctx *ctx, const sl_build_opts *o, const char *path, int64_t counts[3])
{
    sl_status st = SL_OK;
    gen_session gs;
    sl_block blk;
    sl_model_writer *w = NULL;
    uint64_t acc[2] = {0, 0};
    memset(&gs, 0, sizeof(gs));
    memset(&blk, 0, sizeof(blk));
    if (path == NULL) return SL_ERR(ctx, SL_EUSAGE, "sl_build_to_file: no output file");
    if (o != NULL && o->block_transitions < 0)
        return SL_ERR(ctx, SL_EUSAGE, "block of %lld transitions: must be positive", (long long)o->block_transitions);
    int64_t block = o != NULL && o->block_transitions > 0 ? o->block_transitions : SL_BUILD_BLOCK_TRANS;
    SL_TRY(gen_open(ctx, o, &gs));
    st = gen_block(ctx, &gs, &blk);
    SL_TRY(sl_agree(ctx, st));

    /* pass 1: count this rank's pairs and transitions, a block at a time,
     * so that every rank knows where its rows start in the file */
    int64_t np = 0, nt = 0;
    gs.t0 = gs.last = sl_now();
    while (st == SL_OK && blk.s_end < gs.s1) {
        sl_block_restart(&blk, blk.s_end, 0, 0);
        st = gen_rows(ctx, &gs, &blk, gs.s1, block, "counting ");
        np += sl_block_pairs(&blk);
        nt += sl_block_trans(&blk);
    }
    if (st == SL_OK) progress(ctx, "counting ", gs.t0, &gs.last, gs.s1 - gs.s0, gs.s1 - gs.s0, 1);
    SL_TRY(sl_agree(ctx, st));
    gen_report_renormalized(ctx, &gs, &blk);
    int64_t begin[3] = {gs.s0, sl_exscan_i64(ctx, np), sl_exscan_i64(ctx, nt)};
    int64_t end[3] = {gs.s1, begin[1] + np, begin[2] + nt};
    gs.meta.n_pairs = sl_sum_i64(ctx, np);
    gs.meta.n_trans = sl_sum_i64(ctx, nt);
    sl_log(ctx, "build: %s: %lld states, %lld pairs, %lld transitions counted in %.1f s", o->generator,
           (long long)gs.meta.n_states, (long long)gs.meta.n_pairs, (long long)gs.meta.n_trans, sl_now() - gs.t0);

    /* pass 2: the same rows again, written and hashed a block at a time;
     * every rank takes part in every round of writes, with no rows once
     * its own are done */
    SL_TRY(sl_store_model_begin(ctx, path, &gs.meta, begin, end, &w));
    sl_block_restart(&blk, gs.s0, begin[1], begin[2]);
    gs.t0 = gs.last = sl_now();
    int64_t rounds = 0;
    for (;;) {
        rounds++;
        sl_block_restart(&blk, blk.s_end, blk.p_end, blk.t_end);
        st = gen_rows(ctx, &gs, &blk, gs.s1, block, "");
        st = sl_agree(ctx, st);
        if (st != SL_OK) break;
        sl_fingerprint_add(acc, &gs.meta, &blk);
        int final = sl_sum_i64(ctx, blk.s_end < gs.s1) == 0;
        st = sl_store_model_append(ctx, w, &gs.meta, &blk, final);
        if (st != SL_OK || final) break;
    }
    if (st == SL_OK) {
        progress(ctx, "", gs.t0, &gs.last, gs.s1 - gs.s0, gs.s1 - gs.s0, 1);
        sl_log(ctx, "build: written in %lld rounds of at most %lld transitions per rank", (long long)rounds,
               (long long)block);
    }
    if (st == SL_OK) st = sl_fingerprint_finish(ctx, &gs.meta, acc, gs.meta.fingerprint);
    st = sl_store_model_end(ctx, &w, &gs.meta, st);
    if (st == SL_OK && counts != NULL) {
        counts[0] = gs.meta.n_states;
        counts[1] = gs.meta.n_pairs;
        counts[2] = gs.meta.n_trans;
    }
cleanup:
    if (w != NULL) st = sl_store_model_end(ctx, &w, &gs.meta, st);
    gen_close(&gs);
    sl_block_free(&blk);
    return st;
}

/* ---- description (sluice info GENERATOR.c) ------------------------------------- */

static void describe_values(FILE *out, const char *unit, const double *v, int64_t n)
{
    double lo = v[0], hi = v[0];
    for (int64_t i = 1; i < n; i++) {
        if (v[i] < lo) lo = v[i];
        if (v[i] > hi) hi = v[i];
    }
    fprintf(out, "values %.6g .. %.6g%s%s", lo, hi, unit && unit[0] ? " " : "", unit ? unit : "");
}

static void describe_labels(FILE *out, const char *const *l, int64_t n)
{
    fprintf(out, "labels");
    for (int64_t i = 0; i < n && i < 12; i++) fprintf(out, "%s %s", i ? "," : "", l[i] ? l[i] : "?");
    if (n > 12) fprintf(out, ", ... (%lld)", (long long)n);
}

sl_status sl_generator_describe(sl_ctx *ctx, const char *generator, FILE *out)
{
    sl_status st = SL_OK;
    char so_path[4400] = "";
    void *dl = NULL, *inst = NULL;
    const sluice_generator_def *g = NULL;
    double *pv = NULL;
    sluice_shape shape;
    sl_build_opts o;
    memset(&o, 0, sizeof(o));
    memset(&shape, 0, sizeof(shape));
    o.generator = generator;
    SL_TRY(load_generator(ctx, &o, so_path, sizeof(so_path), &dl, &g));
    if (SL_ALLOC(ctx, pv, g->n_params, "parameters") == NULL) st = SL_ENOMEM;
    SL_TRY(sl_agree(ctx, st));
    for (int i = 0; i < g->n_params; i++) pv[i] = g->params[i].default_value;
    char err[512] = "";
    int rc = ctx->rank == 0 ? g->init(pv, &shape, &inst, err, sizeof(err)) : 0;
    if (rc != 0)
        st = SL_ERR(ctx, SL_EDATA, "%s: generator init failed with the default parameters (code %d): %s", generator,
                    rc, err[0] ? err : "no message");
    if (st == SL_OK && ctx->rank == 0 &&
        (shape.n_factors < 0 || shape.n_factors > SLUICE_MAX_FACTORS || shape.n_actions <= 0 ||
         (g->abi_version >= 2 && (shape.n_quantities < 0 || shape.n_quantities > SLUICE_MAX_QUANTITIES ||
                                  (shape.n_quantities > 0 && shape.quantities == NULL)))))
        st = SL_ERR(ctx, SL_EDATA, "%s: the generator reports an impossible shape (factors %d, actions %d)",
                    generator, shape.n_factors, (int)shape.n_actions);
    SL_TRY(sl_agree(ctx, st));
    if (ctx->rank == 0) {
        fprintf(out, "%s: generator \"%s\" (ABI %d)\n  %s\n", generator, g->name ? g->name : "?", g->abi_version,
                g->description ? g->description : "");
        fprintf(out, "parameters (set with sluice build --param NAME=VALUE):\n");
        fprintf(out, "  %-22s %12s  %-12s %s\n", "name", "default", "unit", "meaning");
        for (int i = 0; i < g->n_params; i++)
            fprintf(out, "  %-22s %12.6g  %-12s %s\n", g->params[i].name ? g->params[i].name : "?",
                    g->params[i].default_value, g->params[i].unit ? g->params[i].unit : "",
                    g->params[i].help ? g->params[i].help : "");
        if (g->n_params == 0) fprintf(out, "  (none)\n");
        fprintf(out, "with the defaults:\n  states       %lld", (long long)shape.n_states);
        for (int f = 0; f < shape.n_factors; f++)
            fprintf(out, "%s%s %lld", f ? " x " : " = ", shape.factors[f].name ? shape.factors[f].name : "?",
                    (long long)shape.factors[f].size);
        fprintf(out, "%s\n", shape.n_factors ? "  (first factor fastest)" : "");
        for (int f = 0; f < shape.n_factors; f++) {
            const sluice_factor_values *fv = g->abi_version >= 2 ? &shape.factor_values[f] : NULL;
            fprintf(out, "  factor       %-12s %lld%s", shape.factors[f].name ? shape.factors[f].name : "?",
                    (long long)shape.factors[f].size, shape.factors[f].stage ? ", stage" : "");
            if (fv && fv->values && shape.factors[f].size > 0) {
                fprintf(out, ", ");
                describe_values(out, fv->unit, fv->values, shape.factors[f].size);
            } else if (fv && fv->unit && fv->unit[0]) {
                fprintf(out, ", unit %s", fv->unit);
            }
            if (fv && fv->labels && shape.factors[f].size > 0) {
                fprintf(out, ", ");
                describe_labels(out, fv->labels, shape.factors[f].size);
            }
            fprintf(out, "\n");
        }
        fprintf(out, "  actions      %d", (int)shape.n_actions);
        if (g->abi_version >= 2 && shape.action_values) {
            fprintf(out, ", ");
            describe_values(out, shape.action_unit, shape.action_values, shape.n_actions);
        }
        fprintf(out, "\n  discount     %.10g", shape.discount);
        if (g->abi_version >= 2 && shape.period_unit) fprintf(out, " per %s", shape.period_unit);
        if (g->abi_version >= 2 && shape.reward_unit) fprintf(out, "\n  reward       %s", shape.reward_unit);
        fprintf(out, "\n");
        int nq = g->abi_version >= 2 ? shape.n_quantities : 0;
        if (nq > 0) {
            fprintf(out, "outcome quantities (per period, stored per state and action as expected value and "
                         "probability of being positive):\n");
            for (int q = 0; q < nq; q++)
                fprintf(out, "  %-22s %-12s %s\n", shape.quantities[q].name ? shape.quantities[q].name : "?",
                        shape.quantities[q].unit ? shape.quantities[q].unit : "",
                        shape.quantities[q].help ? shape.quantities[q].help : "");
        } else {
            fprintf(out, "outcome quantities: none%s\n", g->abi_version < 2 ? " (an ABI 1 generator)" : "");
        }
        fprintf(out, "terminal values: %s\n",
                dlsym(dl, SLUICE_TERMINAL_VALUE_SYMBOL) ? "from " SLUICE_TERMINAL_VALUE_SYMBOL "() (finite objective)"
                                                        : "none");
    }
cleanup:
    if (inst && g && g->finish) g->finish(inst);
    if (dl) dlclose(dl);
    free(pv);
    return st;
}

sl_status sl_model_from_generator(sl_ctx *ctx, const char *path_or_so, int n_params, const char *const *names,
                                  const double *values, sl_model **m)
{
    sl_build_opts o;
    memset(&o, 0, sizeof(o));
    o.generator = path_or_so;
    o.n_params = n_params;
    o.param_names = names;
    o.param_values = values;
    return sl_model_from_generator_opts(ctx, &o, m);
}
