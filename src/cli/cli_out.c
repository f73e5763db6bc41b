/* cli_out.c - atomic text outputs of the CLI. */
#include <errno.h>
#include <string.h>
#include <unistd.h>

#include "cli/cli_out.h"

int cli_write_atomic(const char *cmd, const char *path, void (*fn)(FILE *f, const void *arg), const void *arg)
{
    char tmp[4200];
    const char *slash = strrchr(path, '/');
    int dl = slash ? (int)(slash - path + 1) : 0;
    if (snprintf(tmp, sizeof(tmp), "%.*s.%s.%ld.partial", dl, path, slash ? slash + 1 : path, (long)getpid()) >=
        (int)sizeof(tmp)) {
        fprintf(stderr, "sluice %s: %s: path too long\n", cmd, path);
        return 73;
    }
    FILE *f = fopen(tmp, "w");
    if (f == NULL) {
        fprintf(stderr, "sluice %s: %s: cannot create: %s\n", cmd, path, strerror(errno));
        return 73;
    }
    fn(f, arg);
    int bad = ferror(f) != 0;
    bad |= fflush(f) != 0;
    bad |= fsync(fileno(f)) != 0;
    bad |= fclose(f) != 0;
    if (bad || rename(tmp, path) != 0) {
        fprintf(stderr, "sluice %s: %s: cannot write: %s\n", cmd, path, strerror(errno));
        unlink(tmp);
        return 74;
    }
    return 0;
}
