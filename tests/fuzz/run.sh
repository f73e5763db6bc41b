#!/usr/bin/env bash
# Build the CSV fuzz target with clang (libFuzzer + ASan + UBSan) and run it
# for a bounded time on the seeds in tests/data/csv_*.csv.
# usage: run.sh SOURCE_DIR WORKDIR [SECONDS]
# clang and its libFuzzer runtime are required for the tests (tools/setup test
# installs them): missing, the test fails with the reason.
set -u
SRC=$1 WORK=$2 SECS=${3:-45}
command -v clang >/dev/null || { echo "not ok - clang not installed (Debian: clang libclang-rt-14-dev)"; echo "0 passed, 1 failed"; exit 1; }
rm -rf "$WORK" && mkdir -p "$WORK/corpus"
inc="-I$SRC/src -I$SRC/include $(pkg-config --cflags hdf5-openmpi)"
libs="$(pkg-config --libs hdf5-openmpi) -ldeflate -lm -ldl"
srcs="$SRC/src/core/core.c $SRC/src/core/names.c $SRC/src/model/model.c $SRC/src/input/csv.c
      $SRC/src/input/import.c $SRC/src/input/estimate.c $SRC/src/store/h5.c $SRC/src/store/h5_chunks.c $SRC/src/store/model_io.c
      $SRC/src/model/handle.c $SRC/src/parallel/layout.c $SRC/src/parallel/stages.c"
if ! OMPI_CC=clang mpicc -std=c11 -D_POSIX_C_SOURCE=200809L -g -O1 -fsanitize=fuzzer,address,undefined \
     $inc "$SRC/tests/fuzz/fuzz_csv.c" $srcs $libs -o "$WORK/fuzz_csv" 2> "$WORK/build.log"; then
  if grep -q "libclang_rt.fuzzer\|cannot find.*fuzzer" "$WORK/build.log"; then
    echo "not ok - libFuzzer runtime missing (Debian: libclang-rt-14-dev)"; echo "0 passed, 1 failed"; exit 1
  fi
  cat "$WORK/build.log"; echo "0 passed, 1 failed"; exit 1
fi
i=0
for f in "$SRC"/tests/data/csv_*.csv; do
  for sel in 0 2 1 3; do printf "\\x$(printf %02x $sel)" > "$WORK/corpus/seed$i"; cat "$f" >> "$WORK/corpus/seed$i"; i=$((i+1)); done
done
export ASAN_OPTIONS=detect_leaks=1 UBSAN_OPTIONS=halt_on_error=1
if "$WORK/fuzz_csv" -max_total_time="$SECS" -max_len=4096 -timeout=10 "$WORK/corpus" > "$WORK/fuzz.log" 2>&1; then
  tail -2 "$WORK/fuzz.log"; echo "1 passed, 0 failed"; exit 0
fi
tail -40 "$WORK/fuzz.log"; echo "0 passed, 1 failed"; exit 1
