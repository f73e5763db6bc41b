#!/usr/bin/env bash
# Install the library into a scratch prefix and build a user's C program
# against it with pkg-config, then run it on a model built by the CLI.
set -u
SLUICE=$1 WORK=$2 SRC=$3
BUILD=$(dirname "$SLUICE")
rm -rf "$WORK" && mkdir -p "$WORK"
pass=0 fail=0
ok() { echo "ok - $1"; pass=$((pass+1)); }
bad() { echo "not ok - $1"; fail=$((fail+1)); }
if cmake --install "$BUILD" --prefix "$WORK/prefix" > "$WORK/install.log" 2>&1; then ok "cmake --install"; else bad "cmake --install"; cat "$WORK/install.log"; fi
cat > "$WORK/user.c" <<'C'
#include <sluice/sluice.h>
int main(int argc, char **argv)
{
    MPI_Init(&argc, &argv);
    sl_ctx *ctx = NULL;
    int rc = 70;
    if (sl_ctx_new(MPI_COMM_WORLD, 0, &ctx) == SL_OK) {
        sl_info_opts o = {argv[1], 1, 0, stdout};
        rc = (int)sl_info(ctx, &o);
        if (rc != 0) fprintf(stderr, "%s\n", sl_ctx_message(ctx));
        sl_ctx_free(&ctx);
    }
    MPI_Finalize();
    return rc;
}
C
export PKG_CONFIG_PATH="$WORK/prefix/lib/pkgconfig"
flags=$(pkg-config --cflags --libs sluice 2>"$WORK/pc.err")
if [ -n "$flags" ]; then ok "pkg-config finds sluice"; else bad "pkg-config finds sluice"; cat "$WORK/pc.err"; fi
if cc -std=c11 -Wall -Wextra -Werror "$WORK/user.c" -o "$WORK/user" $flags -Wl,-rpath,"$WORK/prefix/lib" 2>"$WORK/cc.err"; then
  ok "user program compiles and links"; else bad "user program compiles and links"; cat "$WORK/cc.err"; fi
"$SLUICE" build "$SRC/examples/two_state.c" -o "$WORK/two.h5" -q
if "$WORK/user" "$WORK/two.h5" > "$WORK/out.json" && grep -q '"n_states": 2' "$WORK/out.json"; then
  ok "user program reads a model through the library"; else bad "user program reads a model through the library"; fi
echo "$pass passed, $fail failed"
[ "$fail" -eq 0 ]
