#!/bin/bash
# bad_input_datasets.sh - bad model files, solutions and checkpoints: model
# datasets of the wrong class, shape or size, probabilities out of range or
# not summing to 1 (each check alone), non-finite numbers, counts that
# overflow, a model truncated at the start of every dataset, solutions and
# checkpoints from a newer version or in a foreign format, two runs on one
# checkpoint directory. Every case is a row of docs/bad-input.md. Split from
# bad_input_more.sh so the mutation pass (tests/mutation/run.sh) can run the
# checks of the readers in about a minute.
# usage: bash bad_input_datasets.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

sl_small_reservoir # $G (720 states), its solution $W/good_sol.h5, $S the output name

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
    elif kind == "target_past":       # one past the last state
        d = f["transition/target"]; d[3] = int(f.attrs["n_states"])
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
    elif kind.startswith("quantity_"): # pair 7 of the energy quantity (read for the fingerprint)
        part, x = {"quantity_mean_inf": ("mean", np.inf), "quantity_mean_nan": ("mean", np.nan),
                   "quantity_pos_above": ("p_positive", np.nextafter(1.0, 2.0)),
                   "quantity_pos_negative": ("p_positive", -1e-300),
                   "quantity_pos_nan": ("p_positive", -np.nan)}[kind]
        d = f["quantity/energy/" + part]; d[7] = x
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
    elif kind in ("prob_range_sum_one", "prob_negative_sum_one", "prob_sum_low"):
        # the first pair with two or more successors past the model's middle;
        # prints "STATE ACTION" for the test to look for in the message
        fp, ft = f["state/first_pair"][...], f["pair/first_transition"][...]
        k = next(k for k in range(len(ft) // 2, len(ft) - 1) if ft[k + 1] - ft[k] >= 2)
        s = int(np.searchsorted(fp, k, side="right") - 1)
        d = f["transition/probability"]; p = d[...]; t = int(ft[k])
        if kind == "prob_range_sum_one":      # 1.25 and 1 - 1.25 - rest: sum still exactly 1
            rest = float(np.sum(p[t + 2:ft[k + 1]]))
            p[t], p[t + 1] = 1.25, 1.0 - 1.25 - rest
        elif kind == "prob_negative_sum_one": # -0.25 and a partner raised by 0.25 (still <= 1)
            q = p[t]; p[t] = -0.25; p[t + 1] += q + 0.25
        else:                                 # every probability of the pair x 0.9
            p[t:ft[k + 1]] *= 0.9
        d[...] = p
        print(s, int(f["pair/action"][k]))
    elif kind == "value_inf":
        d = f["value"]; d[0] = np.inf
    elif kind == "ckpt_value_nan":    # NaN at state 5 of a checkpoint, its checksum made to match
        # the checksum (docs/formats.md): sum over states i of
        # mix(mix(i) ^ bits(value[i])) mod 2^64, mix the splitmix64 finaliser
        # (src/core/core.h); recomputed for the file as written first, so an
        # error here is the script's, not the loader's
        M = (1 << 64) - 1
        def mix(x):
            x = (x + 0x9e3779b97f4a7c15) & M
            x = ((x ^ (x >> 30)) * 0xbf58476d1ce4e5b9) & M
            x = ((x ^ (x >> 27)) * 0x94d049bb133111eb) & M
            return x ^ (x >> 31)
        def checksum(v):
            bits = v.astype("<f8").view("<u8")
            return "%016x" % (sum(mix(mix(i) ^ int(b)) for i, b in enumerate(bits)) & M)
        v = f["value"][...]
        stored = f.attrs["value_checksum"]
        stored = stored.decode() if isinstance(stored, bytes) else str(stored)
        if checksum(v) != stored:
            sys.exit("edit.py: checksum of the unedited checkpoint is %s, file says %s" % (checksum(v), stored))
        v[5] = np.nan
        f["value"][...] = v
        f.attrs.modify("value_checksum", np.bytes_(checksum(v)))  # keeps the attribute's string type
    elif kind.startswith("chunk_"):   # the first stored chunk of /transition/probability replaced
        import zlib
        d = f["transition/probability"]
        mask, raw = d.id.read_direct_chunk((0,))
        plain = zlib.decompress(raw)    # shuffled bytes of one whole chunk
        if kind == "chunk_flipped":     # 16 bytes in the middle of the deflate stream
            b = bytearray(raw)
            for i in range(len(b) // 2, len(b) // 2 + 16):
                b[i] ^= 0x5A
            new = bytes(b)
        elif kind == "chunk_checksum":  # the stream intact, its adler32 trailer off by one bit
            new = raw[:-1] + bytes([raw[-1] ^ 1])
        elif kind == "chunk_short":     # a valid stream of one element less than a chunk
            new = zlib.compress(plain[:-8], 1)
        elif kind == "chunk_long":      # a valid stream of one element more
            new = zlib.compress(plain + bytes(8), 1)
        elif kind == "chunk_header":    # compression method 7 in the zlib header (deflate is 8)
            new = bytes([(raw[0] & 0xF0) | 7]) + raw[1:]
        elif kind == "chunk_cut":       # the deflate stream whole, the last two checksum bytes cut off
            new = raw[:-2]
        else:                           # chunk_oversized: the stream followed by a chunk of zeros,
            new = raw + bytes(len(plain))  # more than zlib's compressBound of a chunk
        d.id.write_direct_chunk((0,), new, mask)
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
model_case "/transition/target equal to n_states (one past the last state)" target_past 65 "next state" "out of range"
model_case "/transition/probability of integer class" prob_int 65 "transition/probability"
model_case "/pair/reward as a 2-D array" reward_2d 65 "pair/reward"
model_case "/transition/probability missing" prob_missing 65 "transition/probability"
model_case "/state/first_pair one entry short" first_pair_short 65 "state/first_pair"
model_case "/state/first_pair decreasing" first_pair_decreasing 65
model_case "/pair/first_transition past the transition count" first_transition_beyond 65
model_case "probability NaN" prob_nan 65
# the range and the sum checks of the reader, each alone (a probability out of
# [0, 1] in a pair that still sums to 1; a pair summing to 0.9 with every
# probability in range): exit 65, the output not written, the state and the
# action named
for kind in prob_range_sum_one prob_negative_sum_one prob_sum_low; do
    sa=$("$PY" "$W/edit.py" "$G" "$kind" "$W/$kind.h5") || note_fail "setup: edit $kind" "h5py edit failed"
    read -r st ac <<<"$sa"
    case $kind in
        prob_sum_low) what="probabilities of state $st, action $ac sum to 0.9"; word="sum to" ;;
        prob_range_sum_one) what="probability 1.25 in state $st, action $ac (the pair sums to 1)"; word="not in [0, 1]" ;;
        *) what="probability -0.25 in state $st, action $ac (the pair sums to 1)"; word="not in [0, 1]" ;;
    esac
    expect "solve: $what" --code 65 --err "$kind.h5" --err "state $st, action $ac" --err "$word" --gone "$S" -- \
        "$SLUICE" solve -q "$W/$kind.h5" -o "$S"
    expect "verify: $what" --code 65 --err "$kind.h5" --err "state $st, action $ac" -- \
        "$SLUICE" verify -q "$W/$kind.h5" "$W/good_sol.h5"
done
# a corrupted compressed chunk (the direct chunk reader, src/store/h5_chunks.c):
# refused with the file, dataset and chunk named, never a crash; H5Dread took
# the short and the long stream without a word (the rows were refused later,
# by the sum check, for the values they held)
model_case "a stored chunk of /transition/probability with 16 bytes flipped" chunk_flipped 65 \
    "transition/probability" "compressed chunk of elements 0.."
model_case "a stored chunk of /transition/probability with a wrong zlib checksum" chunk_checksum 65 \
    "transition/probability" "compressed chunk of elements 0.." "adler32 checksum does not match"
model_case "a stored chunk of /transition/probability inflating to one element less" chunk_short 65 \
    "transition/probability" "compressed chunk of elements 0.." "less than a chunk"
model_case "a stored chunk of /transition/probability inflating to one element more" chunk_long 65 \
    "transition/probability" "compressed chunk of elements 0.." "more than a chunk"
model_case "a stored chunk of /transition/probability whose zlib header names another method" chunk_header 65 \
    "transition/probability" "compressed chunk of elements 0.." "not a zlib stream"
model_case "a stored chunk of /transition/probability cut inside its checksum" chunk_cut 65 \
    "transition/probability" "compressed chunk of elements 0.." "truncated before its checksum"
model_case "a stored chunk of /transition/probability longer than any deflated chunk can be" chunk_oversized 65 \
    "transition/probability" "more than a chunk of"
model_case "probability +Inf" prob_inf 65
model_case "reward -Inf" reward_inf 65
# the quantities' checks (each value of every pair, on the bits; the message
# from the plain test): pair 7 of /quantity/energy
model_case "a quantity's mean +Inf" quantity_mean_inf 65 "/quantity/energy/mean[7]" "not finite"
model_case "a quantity's mean NaN" quantity_mean_nan 65 "/quantity/energy/mean[7]" "not finite"
model_case "a quantity's p_positive the next double above 1" quantity_pos_above 65 \
    "/quantity/energy/p_positive[7]" "not a probability"
model_case "a quantity's p_positive -1e-300" quantity_pos_negative 65 "/quantity/energy/p_positive[7]" \
    "not a probability"
model_case "a quantity's p_positive NaN with the sign bit set" quantity_pos_nan 65 \
    "/quantity/energy/p_positive[7]" "not a probability"
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
# a checkpoint whose checksum matches but whose /value holds a NaN (a
# diverged run, a crafted file): refused by name, never set aside
mkdir -p "$W/ck_nan" && edit "$W/ck/ckpt-000001.h5" ckpt_value_nan "$W/ck_nan/ckpt-000001.h5"
expect "solve --resume: the only checkpoint's /value holds a NaN (checksum matching)" --code 65 \
    --err "ckpt-000001.h5" --err "/value" --err "state 5:" --err "not finite" \
    --keep "$W/ck_nan/ckpt-000001.h5" --gone "$S" -- "$SLUICE" solve -q "$G" -o "$S" --checkpoint "$W/ck_nan" --resume
[ ! -e "$W/ck_nan/ckpt-000001.h5.unusable" ] && note_ok "the NaN checkpoint, the only one, was not set aside" ||
    note_fail "the NaN checkpoint, the only one, was not set aside" "renamed to .unusable"
# the same as the newer of two: the older good one is resumed from, the NaN
# one set aside (renamed, not deleted) and named in the warning
mkdir -p "$W/ck_nan2" && cp "$W/ck/ckpt-000001.h5" "$W/ck_nan2/ckpt-000001.h5" &&
    cp "$W/ck_nan/ckpt-000001.h5" "$W/ck_nan2/ckpt-000002.h5"
expect "solve --resume: the newest checkpoint's /value holds a NaN: resumed from the older (set aside, not ignored)" \
    --code 0 --err "ckpt-000002.h5" --err "not finite" --err "resuming from the older" -- \
    "$SLUICE" solve -q "$G" -o "$W/nan2_sol.h5" --checkpoint "$W/ck_nan2" --resume
cmp -s "$W/ck_nan/ckpt-000001.h5" "$W/ck_nan2/ckpt-000002.h5.unusable" &&
    note_ok "the NaN checkpoint was set aside byte-identical as ckpt-000002.h5.unusable" ||
    note_fail "the NaN checkpoint set aside" "ckpt-000002.h5.unusable missing or changed"
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
sl_finish
