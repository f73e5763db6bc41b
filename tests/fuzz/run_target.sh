#!/usr/bin/env bash
# Build one fuzz target with clang (libFuzzer + ASan + UBSan), replay every
# stored crash regression (tests/fuzz/regress_TARGET/) and the stored corpus
# (tests/fuzz/corpus_TARGET/), then fuzz for a bounded time.
# usage: run_target.sh SOURCE_DIR WORKDIR TARGET [SECONDS]
#   TARGET: validate (model dataset contents), parse (NAME=VALUE and state
#   text), statecsv (start distributions and rules keyed by state), solution
#   (the contents of solution, values, stage and checkpoint files), param
#   (build --param NAME=VALUE and the number options)
# Documented bounded run: nice -n 10 bash tests/fuzz/run_target.sh . /tmp/fz-parse parse 300
set -u
SRC=$1 WORK=$2 T=$3 SECS=${4:-30}
dict="" # a libFuzzer dictionary of the format's pieces, if the target has one
[ -f "$SRC/tests/fuzz/$T.dict" ] && dict="-dict=$SRC/tests/fuzz/$T.dict"
# labels.c also looks a state up in a model file: the store comes along
store="src/core/core.c src/core/names.c src/model/model.c src/model/handle.c src/parallel/layout.c src/parallel/stages.c src/store/h5.c src/store/h5_chunks.c src/store/model_io.c"
case "$T" in
  validate) libs="src/core/core.c src/model/model.c" ;;
  parse) libs="$store src/analysis/labels.c" ;;
  param) libs="src/cli/param.c" ;;
  solution) libs="src/core/core.c src/model/model.c src/store/content.c" ;;
  statecsv) libs="$store src/analysis/labels.c src/analysis/statecsv.c src/analysis/policycsv.c src/store/solution_io.c src/store/content.c src/solve/solution.c src/analysis/words.c"; max_len=2048 ;;
  *) echo "not ok - unknown fuzz target '$T'"; echo "0 passed, 1 failed"; exit 1 ;;
esac
command -v clang >/dev/null || { echo "not ok - clang not installed (Debian: clang libclang-rt-14-dev)"; echo "0 passed, 1 failed"; exit 1; }
rm -rf "$WORK" && mkdir -p "$WORK/corpus"
if ! OMPI_CC=clang mpicc -std=c11 -D_POSIX_C_SOURCE=200809L -g -O1 -fsanitize=fuzzer,address,undefined \
     -I"$SRC/src" -I"$SRC/include" $(pkg-config --cflags hdf5-openmpi) "$SRC/tests/fuzz/fuzz_$T.c" \
     $(for f in $libs; do printf '%s ' "$SRC/$f"; done) $(pkg-config --libs hdf5-openmpi) -ldeflate -lm \
     -o "$WORK/fuzz_$T" 2> "$WORK/build.log"; then
  cat "$WORK/build.log"; echo "not ok - build the fuzz target"; echo "0 passed, 1 failed"; exit 1
fi
export ASAN_OPTIONS=detect_leaks=1 UBSAN_OPTIONS=halt_on_error=1
pass=0 fail=0
n=$(ls "$SRC/tests/fuzz/regress_$T/" 2>/dev/null | wc -l) # none stored: no directory in git
if [ "$n" -eq 0 ]; then
  echo "ok - no crash regressions stored"; pass=$((pass + 1))
elif "$WORK/fuzz_$T" "$SRC/tests/fuzz/regress_$T"/* > "$WORK/regress.log" 2>&1; then
  echo "ok - $n crash regressions replayed"; pass=$((pass + 1))
else
  tail -20 "$WORK/regress.log"; echo "not ok - a crash regression fails again"; fail=$((fail + 1))
fi
cp "$SRC/tests/fuzz/corpus_$T"/* "$WORK/corpus/"
if "$WORK/fuzz_$T" -max_total_time="$SECS" -max_len="${max_len:-512}" $dict -timeout=10 -artifact_prefix="$WORK/" "$WORK/corpus" \
     > "$WORK/fuzz.log" 2>&1; then
  echo "ok - fuzzed for $SECS s: $(grep -o 'Done [0-9]* runs' "$WORK/fuzz.log")"; pass=$((pass + 1))
else
  tail -40 "$WORK/fuzz.log"; echo "not ok - fuzzing found a failure (input saved in $WORK)"; fail=$((fail + 1))
fi
echo "$pass passed, $fail failed"
[ "$fail" -eq 0 ]
