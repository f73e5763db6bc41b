#!/bin/bash
# bad_input_more.sh - bad input the other bad_input_*.sh suites do not cover:
# model datasets of the wrong class, shape or size, non-finite numbers,
# counts that overflow, a model truncated at the start of every dataset,
# checkpoints from a newer version or in a foreign format, two runs on one
# checkpoint directory, permission denied and read-only directories (run as
# an unprivileged user through setpriv when the test runs as root), a full
# disk for the solution, out of memory, generators that run away, and
# signals during start-up. Every case is a row of docs/bad-input.md.
# usage: bash bad_input_more.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

G=$W/good.h5
S=$W/sol.h5
expect "setup: a small reservoir model builds" --code 0 -- \
    "$SLUICE" build -q "$SRC/examples/reservoir.c" --param storage_levels=20 --param inflow_classes=3 -o "$G"
expect "setup: it solves" --code 0 -- "$SLUICE" solve -q "$G" -o "$W/good_sol.h5"

# ---------------------------------------------------------------- model datasets
# edit.py SRC KIND DST: a copy of SRC with one change (h5py)
cat >"$W/edit.py" <<'PYEOF'
import shutil, sys
import h5py
import numpy as np
src, kind, dst = sys.argv[1:4]
shutil.copyfile(src, dst)
def replace(f, name, data):
    attrs = dict(f[name].attrs)
    del f[name]
    f.create_dataset(name, data=data)
    for k, v in attrs.items():
        f[name].attrs[k] = v
with h5py.File(dst, "r+") as f:
    if kind == "target_float":        # same values, floating-point class
        replace(f, "transition/target", f["transition/target"][...].astype(np.float64))
    elif kind == "target_negative":
        d = f["transition/target"]; d[3] = -5
    elif kind == "prob_int":          # integer class (values 0/1 after the cast)
        replace(f, "transition/probability", np.rint(f["transition/probability"][...]).astype(np.int32))
    elif kind == "reward_2d":
        r = f["pair/reward"][...]
        replace(f, "pair/reward", np.stack([r, r], axis=1))
    elif kind == "prob_missing":
        del f["transition/probability"]
    elif kind == "extra_dataset":     # an unknown dataset next to the known ones
        f.create_dataset("notes/extra", data=np.arange(5))
    elif kind == "first_pair_short":  # n_states entries instead of n_states + 1
        replace(f, "state/first_pair", f["state/first_pair"][:-1])
    elif kind == "first_pair_decreasing":
        d = f["state/first_pair"]; a = d[...]; d[5] = a[4] - 1
    elif kind == "first_transition_beyond":
        d = f["pair/first_transition"]; d[-1] = d[-1] + 1000
    elif kind == "prob_nan":
        d = f["transition/probability"]; d[2] = np.nan
    elif kind == "prob_inf":
        d = f["transition/probability"]; d[2] = np.inf
    elif kind == "reward_inf":
        d = f["pair/reward"]; d[1] = -np.inf
    elif kind == "reward_nan":
        d = f["pair/reward"]; d[1] = np.nan
    elif kind == "discount_nan":
        f.attrs.modify("discount", np.nan)
    elif kind == "n_trans_huge":      # 2^62 transitions: must not be allocated
        f.attrs.modify("n_transitions", np.int64(1) << 62)
    elif kind == "n_pairs_negative":
        f.attrs.modify("n_pairs", np.int64(-1))
    elif kind == "n_states_huge":
        f.attrs.modify("n_states", np.int64(1) << 62)
    elif kind == "solution_version":  # a solution written by a newer sluice
        f.attrs.modify("format_version", np.int64(99))
    elif kind == "ckpt_version":      # a checkpoint written by a newer sluice
        f.attrs.modify("format_version", np.int64(2))
    elif kind == "value_inf":
        d = f["value"]; d[0] = np.inf
    else:
        sys.exit("edit.py: unknown kind " + kind)
PYEOF
edit() { "$PY" "$W/edit.py" "$@" || note_fail "setup: edit $2" "h5py edit failed"; }

# model_case NAME KIND CODE WORD...: info and solve on an edited copy of the model
model_case() {
    local name=$1 kind=$2 code=$3 e=() k
    shift 3
    for k in "$@"; do e+=(--err "$k"); done
    edit "$G" "$kind" "$W/$kind.h5"
    expect "solve: $name" --code "$code" --err "$kind.h5" "${e[@]}" --gone "$S" -- \
        "$SLUICE" solve -q "$W/$kind.h5" -o "$S"
}
model_case "/transition/target of floating-point class" target_float 65 "transition/target"
model_case "/transition/target negative" target_negative 65
model_case "/transition/probability of integer class" prob_int 65 "transition/probability"
model_case "/pair/reward as a 2-D array" reward_2d 65 "pair/reward"
model_case "/transition/probability missing" prob_missing 65 "transition/probability"
model_case "/state/first_pair one entry short" first_pair_short 65 "state/first_pair"
model_case "/state/first_pair decreasing" first_pair_decreasing 65
model_case "/pair/first_transition past the transition count" first_transition_beyond 65
model_case "probability NaN" prob_nan 65
model_case "probability +Inf" prob_inf 65
model_case "reward -Inf" reward_inf 65
model_case "reward NaN" reward_nan 65
model_case "discount NaN" discount_nan 65 "discount"
model_case "n_transitions 2^62 (no allocation attempted)" n_trans_huge 65
model_case "n_pairs -1" n_pairs_negative 65
model_case "n_states 2^62 (no allocation attempted)" n_states_huge 65
edit "$G" extra_dataset "$W/extra.h5"
expect "solve: an extra unknown dataset is ignored" --code 0 -- "$SLUICE" solve -q "$W/extra.h5" -o "$W/extra_sol.h5"

# truncated at the start of every dataset (and in the middle of the last one)
offsets=$("$PY" - "$G" <<'PYEOF'
import sys, h5py
out = []
with h5py.File(sys.argv[1], "r") as f:
    def visit(name, obj):
        if isinstance(obj, h5py.Dataset):
            if obj.chunks is not None:
                info = obj.id.get_chunk_info(0)
                out.append((info.byte_offset, name))
            elif obj.id.get_offset() is not None:
                out.append((obj.id.get_offset(), name))
    f.visititems(visit)
for off, name in sorted(out):
    print(off, name.replace("/", "_"))
PYEOF
)
n_trunc=0
while read -r off name; do
    [ -n "$off" ] || continue
    cp "$G" "$W/trunc_$name.h5" && truncate -s "$off" "$W/trunc_$name.h5"
    expect "solve: model truncated where $name begins (byte $off)" --code "65|74" --err "trunc_$name.h5" \
        --gone "$S" -- "$SLUICE" solve -q "$W/trunc_$name.h5" -o "$S"
    n_trunc=$((n_trunc + 1))
done <<<"$offsets"
[ "$n_trunc" -ge 6 ] && note_ok "truncation points: $n_trunc datasets" ||
    note_fail "truncation points" "only $n_trunc datasets located"

# ---------------------------------------------------------------- solutions
cp "$W/good_sol.h5" "$W/solv.h5" && edit "$W/good_sol.h5" solution_version "$W/solution_version.h5"
expect "verify: solution written by a newer sluice" --code 65 --err "solution_version.h5" --err "format_version" -- \
    "$SLUICE" verify -q "$G" "$W/solution_version.h5"
edit "$W/good_sol.h5" value_inf "$W/value_inf.h5"
expect "verify: solution value +Inf" --code 65 --err "value_inf.h5" -- "$SLUICE" verify -q "$G" "$W/value_inf.h5"
expect "export: solution value +Inf" --code 65 --err "value_inf.h5" --gone "$W/x.csv" -- \
    "$SLUICE" export "$W/value_inf.h5" --model "$G" -o "$W/x.csv"

# ---------------------------------------------------------------- checkpoints
"$SLUICE" solve -q "$G" -o "$W/c_sol.h5" --checkpoint "$W/ck" --max-iterations 5 >/dev/null 2>&1
[ -f "$W/ck/ckpt-000001.h5" ] || note_fail "setup: a checkpoint" "none written"
mkdir -p "$W/ck_new" && edit "$W/ck/ckpt-000001.h5" ckpt_version "$W/ck_new/ckpt-000001.h5"
expect "solve --resume: checkpoint written by a newer sluice is refused" --code 65 --err "ckpt-000001.h5" \
    --err "newer" --keep "$W/ck_new/ckpt-000001.h5" --gone "$S" -- \
    "$SLUICE" solve -q "$G" -o "$S" --checkpoint "$W/ck_new" --resume
[ ! -e "$W/ck_new/ckpt-000001.h5.unusable" ] && note_ok "the newer checkpoint was not set aside" ||
    note_fail "the newer checkpoint was not set aside" "renamed to .unusable"
mkdir -p "$W/ck_foreign"
"$PY" -c 'import h5py,sys; f=h5py.File(sys.argv[1],"w"); f["x"]=[1,2,3]; f.close()' "$W/ck_foreign/ckpt-000001.h5"
expect "solve --resume: a foreign HDF5 file named like a checkpoint" --code 65 --err "ckpt-000001.h5" \
    --err "no usable checkpoint" --keep "$W/ck_foreign/ckpt-000001.h5" --gone "$S" -- \
    "$SLUICE" solve -q "$G" -o "$S" --checkpoint "$W/ck_foreign" --resume
echo "not a directory" >"$W/ck_file"
expect "solve: --checkpoint names a regular file" --code "64|73" --err "ck_file" --keep "$W/ck_file" --gone "$S" -- \
    "$SLUICE" solve -q "$G" -o "$S" --checkpoint "$W/ck_file"

# two runs on one checkpoint directory: the second stops at once (73), the
# first is not disturbed. The first is held (SIGSTOP) once its header line
# shows it is running, so the order does not depend on the machine's speed.
"$SLUICE" build -q "$SRC/examples/reservoir.c" --param storage_levels=200 --param inflow_classes=8 -o "$W/mid.h5"
"$SLUICE" solve "$W/mid.h5" -o "$W/first.h5" --checkpoint "$W/shared" --method jacobi --progress-every 1000 \
    >"$W/first.log" 2>&1 &
first=$!
for _ in $(seq 1 6000); do grep -Eq "solve: .*rank\(s\), tolerance" "$W/first.log" && break; sleep 0.05; done
kill -STOP "$first"
expect "solve: a second run on a checkpoint directory in use" --code 73 --err "shared" --err "in use by another run" \
    --err "pid $first" --gone "$W/second.h5" -- \
    "$SLUICE" solve -q "$W/mid.h5" -o "$W/second.h5" --checkpoint "$W/shared" --resume
kill -CONT "$first"
kill -USR2 "$first"
wait "$first"
rc=$?
if [ $rc -eq 75 ] && [ -f "$W/shared/ckpt-000001.h5" ] && "$SLUICE" info "$W/shared/ckpt-000001.h5" >/dev/null 2>&1; then
    note_ok "the first run was not disturbed: it stopped on USR2 with exit 75 and a readable checkpoint"
else
    note_fail "the first run was not disturbed" "exit $rc; $(ls "$W/shared" | tr '\n' ' ')"
fi
expect "solve --resume after the first run ended: the lock is free again" --code 0 -- \
    "$SLUICE" solve -q "$W/mid.h5" -o "$W/third.h5" --checkpoint "$W/shared" --resume --method jacobi

# ---------------------------------------------------------------- permissions
# as root, drop to nobody for these (root ignores file permissions)
as_user=()
if [ "$(id -u)" = 0 ]; then
    if command -v setpriv >/dev/null; then
        as_user=(setpriv --reuid=65534 --regid=65534 --clear-groups --)
    else
        note_fail "permissions" "running as root and setpriv (util-linux) is missing"
    fi
fi
P=$W/perm
mkdir -p "$P/ro" "$P/rw" && cp "$G" "$P/model.h5" && cp "$G" "$P/secret.h5" && chmod 000 "$P/secret.h5"
chmod 777 "$P/rw" && chmod 555 "$P/ro" && chmod 755 "$P" && chmod 644 "$P/model.h5" && chmod o+x "$W"
echo keep >"$P/ro/old.h5"
expect "info: model file not readable (permission denied)" --code "66|74" --err "secret.h5" \
    --err "ermission denied" -- "${as_user[@]}" "$SLUICE" info "$P/secret.h5"
expect "solve: output into a read-only directory" --code 73 --err "ro" --gone "$P/ro/s.h5" -- \
    "${as_user[@]}" env SLUICE_CACHE="$P/rw/cache" "$SLUICE" solve -q "$P/model.h5" -o "$P/ro/s.h5"
expect "solve: over an existing file in a read-only directory (the file is kept)" --code 73 --err "ro" \
    --keep "$P/ro/old.h5" -- "${as_user[@]}" "$SLUICE" solve -q "$P/model.h5" -o "$P/ro/old.h5"
expect "solve: checkpoint directory not writable" --code 73 --err "ro" --gone "$P/rw/s.h5" -- \
    "${as_user[@]}" "$SLUICE" solve -q "$P/model.h5" -o "$P/rw/s.h5" --checkpoint "$P/ro/ck"
expect "build: output into a read-only directory" --code 73 --err "ro" --gone "$P/ro/m.h5" -- \
    "${as_user[@]}" env SLUICE_CACHE="$P/rw/cache" "$SLUICE" build -q "$SRC/tests/data/gen_runaway.c" -o "$P/ro/m.h5"
chmod 644 "$P/secret.h5"

# ---------------------------------------------------------------- disk full
# full_disk KB_FREE: a 64 kB tmpfs at $W/full holding old.h5 and a filler
# that leaves KB_FREE kB (root only)
full_disk() {
    mkdir -p "$W/full" && mount -t tmpfs -o size=64k tmpfs "$W/full" 2>/dev/null || return 1
    echo keep >"$W/full/old.h5"
    dd if=/dev/zero of="$W/full/fill" bs=1k count=$((60 - $1)) 2>/dev/null
    return 0
}
if [ "$(id -u)" = 0 ] && full_disk 20; then
    expect "solve: solution larger than the free space (20 kB free)" --code 74 --err "s.h5" \
        --err "not enough free space" --gone "$W/full/s.h5" -- "$SLUICE" solve -q "$W/mid.h5" -o "$W/full/s.h5"
    expect "build: model larger than the free space, previous file kept" --code 74 --err "old.h5" \
        --err "not enough free space" --keep "$W/full/old.h5" -- "$SLUICE" build -q "$SRC/examples/reservoir.c" \
        --param storage_levels=20 --param inflow_classes=3 -o "$W/full/old.h5"
    umount "$W/full"
    full_disk 0
    expect "solve: solution onto a full disk (0 kB free)" --code "73|74" --err "s.h5" --gone "$W/full/s.h5" -- \
        "$SLUICE" solve -q "$G" -o "$W/full/s.h5"
    umount "$W/full"
else
    note_fail "disk full" "needs root to mount a small tmpfs (the checkpoint case is in checkpoint_corrupt.sh)"
fi

# ---------------------------------------------------------------- out of memory
# 1.5 GB of address space: enough to start, not for 2^33 doubles of values
expect "solve: out of memory (ulimit -v, n_states 2^33 claimed)" --code "65|71" --gone "$S" -- \
    bash -c "ulimit -v 1500000; exec \"\$0\" solve -q \"\$1\" -o \"\$2\"" "$SLUICE" "$W/n_states_huge.h5" "$S"
"$SLUICE" build -q "$SRC/examples/reservoir.c" --param storage_levels=400 --param inflow_classes=10 -o "$W/big.h5"
expect "solve: out of memory (ulimit -v 600 MB, a 48,000-state model)" --code 71 --err "memory" --gone "$S" -- \
    bash -c "ulimit -v 600000; exec \"\$0\" solve -q \"\$1\" -o \"\$2\" --method pi --direct-time-limit 0" "$SLUICE" "$W/big.h5" "$S"

# ---------------------------------------------------------------- generators
R=$SRC/tests/data/gen_runaway.c
expect "build: the runaway test generator in its valid mode" --code 0 -- "$SLUICE" build -q "$R" -o "$W/run0.h5"
expect "build: a generator that emits 10^9 successors for one pair" --code 65 --err "state 2, action 1" \
    --err "more than" --gone "$W/run1.h5" -- "$SLUICE" build -q "$R" --param mode=1 -o "$W/run1.h5"
# an endless loop: the user stops it; it must say where it was, write nothing
cp "$W/run0.h5" "$W/run2.h5"
"$SLUICE" build -q "$R" --param mode=2 -o "$W/run2.h5" >"$W/run2.out" 2>"$W/run2.err" &
pid=$!
for _ in $(seq 1 6000); do grep -q "runaway: looping" "$W/run2.err" && break; sleep 0.05; done
kill -TERM "$pid"
wait "$pid"
rc=$?
if [ $rc -eq 65 ] && grep -q "stopped (signal 15) while generating state 2, action 1" "$W/run2.err" &&
    cmp -s "$W/run0.h5" "$W/run2.h5" && [ -z "$(_sl_leftovers "$W/run2.h5")" ]; then
    note_ok "build: a generator in an endless loop, stopped with SIGTERM: exit 65 naming state 2, action 1; the previous file kept"
else
    note_fail "build: a generator in an endless loop, stopped with SIGTERM" "exit $rc; $(tail -n 2 "$W/run2.err" | tr '\n' ' ')"
fi

# ---------------------------------------------------------------- signal during start-up
# SIGTERM before the solver's first sweep (while the model loads): exit 75
# with a valid checkpoint, or killed by the signal before the handlers exist;
# never a solution file, never an invalid checkpoint.
n_early=0 n75=0 bad=0
for d in 0 0.01 0.05 0.1 0.2 0.3; do
    rm -rf "$W/su" "$W/su.h5"
    "$SLUICE" solve "$W/mid.h5" -o "$W/su.h5" --checkpoint "$W/su" --progress-every 1000 >"$W/su.log" 2>&1 &
    pid=$!
    sleep "$d"
    kill -TERM "$pid" 2>/dev/null
    wait "$pid"
    rc=$?
    case $rc in
        75) n75=$((n75 + 1)) ;;
        143) n_early=$((n_early + 1)) ;;
        0) ;; # finished before the signal: nothing to check
        *) bad=$((bad + 1)); echo "# start-up signal after $d s: exit $rc: $(tail -n 1 "$W/su.log")" ;;
    esac
    if [ $rc -ne 0 ] && [ $rc -ne 75 ] && [ -e "$W/su.h5" ]; then
        bad=$((bad + 1)); echo "# start-up signal after $d s: exit $rc left su.h5"
    fi
    for f in "$W"/su/ckpt-*.h5; do
        [ -e "$f" ] || continue
        "$SLUICE" info "$f" >/dev/null 2>&1 || { bad=$((bad + 1)); echo "# $f is not readable"; }
    done
    [ -z "$(ls -a "$W/su" 2>/dev/null | grep partial)" ] || { bad=$((bad + 1)); echo "# a temporary was left in su/"; }
done
if [ $bad -eq 0 ]; then
    note_ok "SIGTERM during start-up (6 moments): $n75 x exit 75, $n_early x killed before the handlers; no stray file"
else
    note_fail "SIGTERM during start-up" "$bad problems"
fi

sl_finish
