/* cli_out.h - atomic text outputs of the CLI (CSV/JSON written by rank 0). */
#ifndef SL_CLI_OUT_H
#define SL_CLI_OUT_H

#include <stdio.h>

/* Write `path` by calling fn(f, arg) on a temporary in the same directory,
 * then fsync and rename; on any failure the temporary is removed, an error
 * naming the path is printed as "sluice CMD: ..." and 73 (cannot create) or
 * 74 (I/O error) is returned; 0 on success. */
int cli_write_atomic(const char *cmd, const char *path, void (*fn)(FILE *f, const void *arg), const void *arg);

#endif
