#!/usr/bin/env bash
# Build the model-validation fuzz target (tests/fuzz/fuzz_validate.c) with
# clang (libFuzzer + ASan + UBSan), replay every stored crash regression
# (tests/fuzz/regress_validate/) and the stored corpus
# (tests/fuzz/corpus_validate/), then fuzz for a bounded time.
# usage: run_validate.sh SOURCE_DIR WORKDIR [SECONDS]
# Documented bounded run: bash tests/fuzz/run_validate.sh . /tmp/fz 300
set -u
SRC=$1 WORK=$2 SECS=${3:-30}
command -v clang >/dev/null || { echo "not ok - clang not installed (Debian: clang libclang-rt-14-dev)"; echo "0 passed, 1 failed"; exit 1; }
rm -rf "$WORK" && mkdir -p "$WORK/corpus"
if ! OMPI_CC=clang mpicc -std=c11 -D_POSIX_C_SOURCE=200809L -g -O1 -fsanitize=fuzzer,address,undefined \
     -I"$SRC/src" -I"$SRC/include" $(pkg-config --cflags hdf5-openmpi) "$SRC/tests/fuzz/fuzz_validate.c" \
     "$SRC/src/core/core.c" "$SRC/src/model/model.c" $(pkg-config --libs hdf5-openmpi) -lm \
     -o "$WORK/fuzz_validate" 2> "$WORK/build.log"; then
  cat "$WORK/build.log"; echo "not ok - build the fuzz target"; echo "0 passed, 1 failed"; exit 1
fi
export ASAN_OPTIONS=detect_leaks=1 UBSAN_OPTIONS=halt_on_error=1
pass=0 fail=0
n=$(ls "$SRC"/tests/fuzz/regress_validate/ | wc -l)
if "$WORK/fuzz_validate" "$SRC"/tests/fuzz/regress_validate/* > "$WORK/regress.log" 2>&1; then
  echo "ok - $n crash regressions replayed"; pass=$((pass + 1))
else
  tail -20 "$WORK/regress.log"; echo "not ok - a crash regression fails again"; fail=$((fail + 1))
fi
cp "$SRC"/tests/fuzz/corpus_validate/* "$WORK/corpus/"
if "$WORK/fuzz_validate" -max_total_time="$SECS" -max_len=512 -timeout=10 "$WORK/corpus" > "$WORK/fuzz.log" 2>&1; then
  echo "ok - fuzzed for $SECS s: $(grep -o 'Done [0-9]* runs' "$WORK/fuzz.log")"; pass=$((pass + 1))
else
  tail -40 "$WORK/fuzz.log"; echo "not ok - fuzzing found a failure (input saved in $WORK)"; fail=$((fail + 1))
fi
echo "$pass passed, $fail failed"
[ "$fail" -eq 0 ]
