/* cmd_report.c - `sluice report`: one self-contained HTML page (and, with
 * --figures, SVG + PNG plots) a reviewer can open, from a model and a solution.
 *
 * The library writes the report-data document (docs/report.md); Node.js runs
 * report/render.mjs, which draws it with Vega. Both outputs appear only when
 * complete: the document goes to a temporary file next to the page, the
 * renderer writes temporaries and renames them into place last. */
#include <errno.h>
#include <limits.h>
#include <spawn.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <sysexits.h>
#include <unistd.h>

#include "cli/cli.h"
#include "sluice/report.h"

extern char **environ;

#ifndef SLUICE_REPORT_SOURCE_DIR
#define SLUICE_REPORT_SOURCE_DIR ""
#endif
#ifndef SLUICE_REPORT_INSTALL_DIR
#define SLUICE_REPORT_INSTALL_DIR ""
#endif

static const char report_help[] =
    "usage: sluice report MODEL.h5 SOLUTION.h5 -o REPORT.html [options]\n"
    "  one self-contained HTML page for a reviewer: the certificate in words and in\n"
    "  the model's units, an independent verification run, convergence, the rule\n"
    "  over two factors, model facts and the caution note. It opens offline.\n"
    "  --figures DIR         also write every plot as a standalone SVG and PNG in DIR\n"
    "  --data FILE.json      also keep the report-data document (docs/report.md)\n"
    "  --data-only           write only the report-data document (--data; no -o, no\n"
    "                        renderer needed)\n"
    "  --no-verify           leave out the independent verification run\n"
    "  --outlook-stages N    stages of the outlook (default 24)\n"
    "  --thin-below K        model from `estimate`: count pairs seen fewer than K times\n"
    "                        as thin (default 10)\n"
    "  --start STATE         start of the outlook: a state number, or every factor as\n"
    "                        NAME=VALUE or NAME@INDEX separated by commas (default: the\n"
    "                        middle of every factor in the first stage)\n"
    "Needs Node.js and the npm packages of report/ (installed by tools/setup);\n"
    "without them it exits 69 naming what is missing. Environment: SLUICE_NODE\n"
    "(the node program), SLUICE_REPORT_DIR (the directory holding render.mjs).\n";

static int is_file(const char *p)
{
    struct stat sb;
    return p[0] != '\0' && stat(p, &sb) == 0 && S_ISREG(sb.st_mode);
}

/* `name` found on $PATH (or a path with a slash), copied to out. */
static int find_program(const char *name, char *out, size_t n)
{
    if (strchr(name, '/')) {
        snprintf(out, n, "%s", name);
        return access(out, X_OK) == 0;
    }
    const char *path = getenv("PATH");
    if (path == NULL) path = "/usr/bin:/bin";
    while (*path) {
        const char *colon = strchr(path, ':');
        size_t len = colon ? (size_t)(colon - path) : strlen(path);
        if (len > 0 && (int)snprintf(out, n, "%.*s/%s", (int)len, path, name) < (int)n && access(out, X_OK) == 0 &&
            is_file(out))
            return 1;
        path += len + (colon != NULL);
    }
    return 0;
}

/* Node.js and the renderer with its npm packages, or a message naming what is missing. */
static int find_renderer(char *node, char *dir, size_t n, int figures, char *msg, size_t mn)
{
    const char *env_node = getenv("SLUICE_NODE");
    if (env_node && *env_node) {
        if (!find_program(env_node, node, n)) {
            snprintf(msg, mn, "SLUICE_NODE=%s is not an executable program", env_node);
            return 0;
        }
    } else if (!find_program("node", node, n) && !find_program("nodejs", node, n)) {
        snprintf(msg, mn, "Node.js is not installed (no 'node' on PATH): install the Debian package nodejs "
                          "(tools/setup does), or set SLUICE_NODE");
        return 0;
    }
    const char *cand[] = {getenv("SLUICE_REPORT_DIR"), SLUICE_REPORT_SOURCE_DIR, SLUICE_REPORT_INSTALL_DIR};
    char probe[PATH_MAX + 64];
    dir[0] = '\0';
    for (size_t k = 0; k < sizeof(cand) / sizeof(cand[0]) && dir[0] == '\0'; k++) {
        if (cand[k] == NULL || cand[k][0] == '\0') continue;
        snprintf(probe, sizeof(probe), "%s/render.mjs", cand[k]);
        if (is_file(probe)) snprintf(dir, n, "%s", cand[k]);
        else if (k == 0) {
            snprintf(msg, mn, "SLUICE_REPORT_DIR=%s holds no render.mjs", cand[k]);
            return 0;
        }
    }
    if (dir[0] == '\0') {
        snprintf(msg, mn, "the report renderer (report/render.mjs) is not installed; looked in %s and %s",
                 SLUICE_REPORT_SOURCE_DIR, SLUICE_REPORT_INSTALL_DIR);
        return 0;
    }
    const char *pkgs[] = {"vega", "vega-lite", "vega-tooltip", "@resvg/resvg-js"};
    for (size_t k = 0; k < sizeof(pkgs) / sizeof(pkgs[0]); k++) {
        if (k == 3 && !figures) continue;
        snprintf(probe, sizeof(probe), "%s/node_modules/%s/package.json", dir, pkgs[k]);
        if (!is_file(probe)) {
            snprintf(msg, mn, "the npm package '%s' is not installed in %s/node_modules: run tools/setup, or "
                              "'npm ci' in %s",
                     pkgs[k], dir, dir);
            return 0;
        }
    }
    return 1;
}

/* Run node render.mjs; returns its exit code mapped to ours. Rank 0. */
static int run_renderer(const char *node, const char *dir, const char *data, const char *out, const char *figures)
{
    char script[PATH_MAX + 16];
    snprintf(script, sizeof(script), "%s/render.mjs", dir);
    char *argv[8];
    int k = 0;
    argv[k++] = (char *)node;
    argv[k++] = script;
    argv[k++] = (char *)data;
    argv[k++] = (char *)"-o";
    argv[k++] = (char *)out;
    if (figures) {
        argv[k++] = (char *)"--figures";
        argv[k++] = (char *)figures;
    }
    argv[k] = NULL;
    fflush(stdout);
    fflush(stderr);
    pid_t pid;
    int e = posix_spawn(&pid, node, NULL, NULL, argv, environ);
    if (e != 0) {
        fprintf(stderr, "sluice report: cannot start %s: %s\n", node, strerror(e));
        return EX_UNAVAILABLE;
    }
    int status = 0;
    while (waitpid(pid, &status, 0) < 0)
        if (errno != EINTR) {
            fprintf(stderr, "sluice report: lost the renderer process: %s\n", strerror(errno));
            return EX_SOFTWARE;
        }
    if (!WIFEXITED(status)) {
        fprintf(stderr, "sluice report: the renderer (%s) was killed by signal %d\n", script, WTERMSIG(status));
        return EX_SOFTWARE;
    }
    int rc = WEXITSTATUS(status);
    /* the renderer names the problem itself; a usage error there is our bug */
    if (rc == EX_USAGE) return EX_SOFTWARE;
    return rc;
}

int cmd_report(cli_args *a)
{
    const char *model = NULL, *solution = NULL, *output = NULL, *figures = NULL, *keep = NULL;
    const char *start = NULL;
    int64_t stages = 0, thin_below = 0;
    int data_only = 0;
    int rc = 0, skip_verify = 0;
    while (a->i < a->argc && rc == 0) {
        int c = cli_common_opt(a, report_help);
        if (c < 0) return 0;
        if (c > 0) continue;
        if (cli_opt(a, "-o") || cli_opt(a, "--output")) {
            if ((output = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--figures")) {
            if ((figures = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--data")) {
            if ((keep = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--data-only")) {
            data_only = 1;
        } else if (cli_opt(a, "--no-verify")) {
            skip_verify = 1;
        } else if (cli_opt(a, "--start")) {
            if ((start = cli_value(a)) == NULL) rc = SL_EUSAGE;
        } else if (cli_opt(a, "--thin-below")) {
            const char *v = cli_value(a);
            if (v == NULL || !cli_int64(a, "--thin-below", v, &thin_below)) rc = SL_EUSAGE;
            else if (thin_below < 1) rc = cli_usage_error(a, "--thin-below: K must be at least 1");
        } else if (cli_opt(a, "--outlook-stages")) {
            const char *v = cli_value(a);
            if (v == NULL || !cli_int64(a, "--outlook-stages", v, &stages)) rc = SL_EUSAGE;
            else if (stages < 1 || stages > 100000) rc = cli_usage_error(a, "--outlook-stages must be in [1, 100000]");
        } else {
            rc = cli_positional(a, (const char **[]){&model, &solution}, 2);
        }
    }
    if (rc) return rc;
    if (model == NULL || solution == NULL) return cli_usage_error(a, "need MODEL.h5 and SOLUTION.h5");
    if (data_only && keep == NULL) return cli_usage_error(a, "--data-only needs --data FILE.json");
    if (data_only && (output || figures)) return cli_usage_error(a, "--data-only writes no page: leave out -o and --figures");
    if (output == NULL && !data_only) return cli_usage_error(a, "no output file given (-o REPORT.html)");

    int root = sl_ctx_rank(a->ctx) == 0;
    char node[PATH_MAX], dir[PATH_MAX], msg[2 * PATH_MAX + 256], data[PATH_MAX + 64] = "";
    FILE *df = NULL;
    /* 1. the renderer must be there before any work is done */
    if (root && !data_only) {
        if (!find_renderer(node, dir, sizeof(node), figures != NULL, msg, sizeof(msg))) {
            fprintf(stderr, "sluice report: %s\n", msg);
            rc = EX_UNAVAILABLE;
        }
    }
    /* 2. the document goes to a temporary file beside the output (which also
     *    checks early that the output directory is writable) */
    if (root && rc == 0) {
        const char *target = keep ? keep : output;
        const char *slash = strrchr(target, '/');
        int dl = slash ? (int)(slash - target) + 1 : 0;
        snprintf(data, sizeof(data), "%.*s.%s.%ld.data.json", dl, target, slash ? slash + 1 : target, (long)getpid());
        df = fopen(data, "w");
        if (df == NULL) {
            fprintf(stderr, "sluice report: %s: cannot create a file there: %s\n", keep ? keep : output, strerror(errno));
            data[0] = '\0';
            rc = SL_ECANTCREAT;
        }
    }
    MPI_Bcast(&rc, 1, MPI_INT, 0, MPI_COMM_WORLD);
    if (rc) return rc;
    /* 3. the document (collective) */
    sl_report_data_opts o;
    memset(&o, 0, sizeof(o));
    o.model = model;
    o.solution = solution;
    o.out = df;
    o.skip_verify = skip_verify;
    o.outlook_start = start;
    o.outlook_stages = stages;
    o.thin_below = thin_below;
    sl_status st = sl_report_data(a->ctx, &o);
    if (root) {
        if (fclose(df) != 0 && st == SL_OK) {
            fprintf(stderr, "sluice report: %s: write failed\n", data);
            rc = SL_EIO;
        }
    }
    if (st != SL_OK) rc = cli_fail(a, st);
    /* 4. draw it */
    if (root && rc == 0 && data_only) {
        if (rename(data, keep) != 0) {
            fprintf(stderr, "sluice report: %s: cannot move into place: %s\n", keep, strerror(errno));
            rc = SL_ECANTCREAT;
        }
    } else if (root && rc == 0) {
        rc = run_renderer(node, dir, data, output, figures);
        if (rc == 0 && keep && rename(data, keep) != 0) {
            fprintf(stderr, "sluice report: %s: cannot move into place: %s\n", keep, strerror(errno));
            remove(output);
            rc = SL_ECANTCREAT;
        }
    }
    if (root && data[0] && (rc != 0 || keep == NULL)) remove(data);
    MPI_Bcast(&rc, 1, MPI_INT, 0, MPI_COMM_WORLD);
    if (root && rc == 0) printf("report: %s\n", data_only ? keep : output);
    return rc;
}
