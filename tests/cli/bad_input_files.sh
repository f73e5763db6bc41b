# bad_input_files.sh - `sluice import` on bad CSV files, and `sluice info` /
# `sluice solve` on missing, foreign, damaged and inconsistent model files.
# usage: bash bad_input_files.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

M=$W/model.h5

# ============================================================ import
cat >"$W/ok.csv" <<'EOF'
state,action,next_state,probability,reward
0,0,1,1,2
1,0,0,0.5,1
1,0,1,0.5,1
1,1,2,1,0
2,0,2,1,-1
EOF
expect "import: a good CSV imports" --code 0 -- "$SLUICE" import -q "$W/ok.csv" --discount 0.9 -o "$W/ok.h5"
expect "import: the imported model solves" --code 0 -- "$SLUICE" solve -q "$W/ok.h5" -o "$W/ok_sol.h5"

expect "import: missing file" --code 66 --err "no_such.csv" --gone "$M" -- \
    "$SLUICE" import -q "$W/no_such.csv" --discount 0.9 -o "$M"
expect "import: wrong header" --code 65 --err "bad_header.csv:1" --err "header" --err "next_state" \
    --gone "$M" -- "$SLUICE" import -q "$DATA/bad_header.csv" --discount 0.9 -o "$M"
expect "import: non-integer state" --code 65 --err "bad_state_text.csv:4" --err "1.5" --err "state" \
    --gone "$M" -- "$SLUICE" import -q "$DATA/bad_state_text.csv" --discount 0.9 -o "$M"
expect "import: probability out of range" --code 65 --err "bad_prob_range.csv:3" --err "1.25" \
    --err "probability" --gone "$M" -- "$SLUICE" import -q "$DATA/bad_prob_range.csv" --discount 0.9 -o "$M"
expect "import: repeated row makes the sum > 1" --code 65 --err "bad_repeat_row.csv" --err "state 1" \
    --err "action 0" --err "1.6" --gone "$M" -- \
    "$SLUICE" import -q "$DATA/bad_repeat_row.csv" --discount 0.9 -o "$M"
expect "import: a state with no rows between 0 and max" --code 65 --err "bad_state_gap.csv" \
    --err "state 1" --gone "$M" -- "$SLUICE" import -q "$DATA/bad_state_gap.csv" --discount 0.9 -o "$M"
expect "import: --discount missing" --code 64 --err "--discount" --gone "$M" -- \
    "$SLUICE" import -q "$W/ok.csv" -o "$M"
expect "import: --discount 1.0 (discounted objective)" --code 64 --err "discount 1" --gone "$M" -- \
    "$SLUICE" import -q "$W/ok.csv" --discount 1.0 -o "$M"
expect "import: --discount negative" --code 64 --err "discount -0.1" --gone "$M" -- \
    "$SLUICE" import -q "$W/ok.csv" --discount -0.1 -o "$M"
expect "import: --discount 1.5" --code 64 --err "discount 1.5" --gone "$M" -- \
    "$SLUICE" import -q "$W/ok.csv" --discount 1.5 -o "$M"
expect "import: --discount not a number" --code 64 --err "--discount" --err "nan" --gone "$M" -- \
    "$SLUICE" import -q "$W/ok.csv" --discount nan -o "$M"

# ============================================================ model files
# damage.py SRC KIND:DST[:refp]...: damaged copies of SRC (written here, run
# with $PY). With :refp the fingerprint is recomputed after the edit, so only
# structural validation can notice the damage.
cat >"$W/damage.py" <<'EOF'
import shutil, sys
import h5py
import numpy as np

M64 = (1 << 64) - 1

def mix(x):
    x = np.asarray(x, dtype=np.uint64)
    with np.errstate(over="ignore"):
        x = x + np.uint64(0x9e3779b97f4a7c15)
        x = (x ^ (x >> np.uint64(30))) * np.uint64(0xbf58476d1ce4e5b9)
        x = (x ^ (x >> np.uint64(27))) * np.uint64(0x94d049bb133111eb)
        return x ^ (x >> np.uint64(31))

def dbits(a):
    a = np.asarray(a, dtype=np.float64).copy()
    a[a == 0.0] = 0.0          # -0 hashes like +0
    return a.view(np.uint64)

def text(v):
    return v.decode() if isinstance(v, bytes) else str(v)

# The model fingerprint, recomputed from the datasets (an independent port of
# the contract "hash of the model's contents"; checked against sluice's own
# value by the fpcheck kind before it is relied on).
def fingerprint(f):
    acc = [0, 0]
    def entries(tag, vals):
        vals = np.asarray(vals).astype(np.uint64)
        pos = np.arange(len(vals), dtype=np.uint64)
        with np.errstate(over="ignore"):
            h = mix(np.uint64(tag) ^ mix(pos ^ mix(vals)))
            h2 = mix(h ^ np.uint64(0x5851f42d4c957f2d))
        acc[0] = (acc[0] + int(h.sum(dtype=np.uint64))) & M64
        acc[1] = (acc[1] + int(h2.sum(dtype=np.uint64))) & M64
    fp = f["state/first_pair"][...].astype(np.int64)
    ft = f["pair/first_transition"][...].astype(np.int64)
    entries(1, fp[1:].view(np.uint64))
    entries(2, f["pair/action"][...].astype(np.uint32))
    entries(3, dbits(f["pair/reward"][...]))
    entries(4, ft[1:].view(np.uint64))
    entries(5, f["transition/target"][...].astype(np.int64).view(np.uint64))
    entries(6, dbits(f["transition/probability"][...]))
    a = f.attrs
    obj = ["discounted", "total", "average", "finite"].index(text(a.get("objective", "discounted")))
    m = lambda v: int(mix(np.uint64(v & M64)))
    head = (m(int(a["n_states"])) ^ m(int(a["n_pairs"]) * 3) ^ m(int(a["n_transitions"]) * 7)
            ^ m(int(dbits([float(a["discount"])])[0])) ^ m(obj + 11))
    if int(a["format_version"]) >= 2:
        # format 2 (docs/formats.md): quantity entries (tags 7+2q, 8+2q) and the
        # annotations hashed in sequence into the header
        qn = [text(x) for x in f["labels/quantity_name"][...]] if "labels/quantity_name" in f else []
        for q, name in enumerate(qn):
            entries(7 + 2 * q, dbits(f["quantity/%s/mean" % name][...]))
            entries(8 + 2 * q, dbits(f["quantity/%s/p_positive" % name][...]))
        def hs(h, s):
            for ch in s.encode():
                h = m(h ^ ch)
            return m(h ^ 0xFF)
        def unit_of(path):
            return text(f[path].attrs.get("unit", b"")) if path in f else ""
        h = 0x243f6a8885a308d3
        for name in [text(x) for x in f["labels/factor_name"][...]]:
            vp, lp = "factor/%s/value" % name, "factor/%s/label" % name
            h = hs(h, unit_of(vp))
            if vp in f:
                for v in dbits(f[vp][...]):
                    h = m(h ^ int(v))
            h = m(h ^ (1 if vp in f else 2))
            if lp in f:
                for lab in f[lp][...]:
                    h = hs(h, text(lab))
            h = m(h ^ (3 if lp in f else 4))
        if "action/value" in f:
            for v in dbits(f["action/value"][...]):
                h = m(h ^ int(v))
        h = hs(h, unit_of("action/value"))
        h = hs(h, text(a.get("reward_unit", b"")))
        h = hs(h, text(a.get("period_unit", b"")))
        for name in qn:
            h = hs(h, name)
            h = hs(h, unit_of("quantity/%s/mean" % name))
        head ^= m((m(h ^ len(qn)) + 13) & M64)
    # optional datasets (docs/formats.md): visit counts of an estimated model
    # (tag 30, per pair) and finite-horizon terminal values (tag 29, per
    # state), each also marking the header when present
    if "pair/visits" in f:
        entries(30, f["pair/visits"][...].astype(np.int64).view(np.uint64))
        head ^= m(0x7669736974730001)
    if "terminal_value" in f:
        entries(29, dbits(f["terminal_value"][...]))
        head ^= m(0x7465726d696e0002)
    return "%016x%016x" % (m(acc[0] ^ head), m((acc[1] + head) & M64))

def flip_chunk(path, dset, chunk):
    with h5py.File(path, "r") as f:
        info = f[dset].id.get_chunk_info(chunk)
    at = info.byte_offset + info.size // 2
    with open(path, "r+b") as g:
        g.seek(at)
        b = g.read(16)
        g.seek(at)
        g.write(bytes(x ^ 0xFF for x in b))

def make(kind, src, dst, refp):
    if kind == "foreign":           # HDF5, but not written by sluice
        with h5py.File(dst, "w") as f:
            f.attrs["n_states"] = 3
            f["values"] = [1.0, 2.0, 3.0]
        return
    shutil.copyfile(src, dst)
    if kind == "flip_reward":       # the one chunk of /pair/reward
        flip_chunk(dst, "pair/reward", 0)
        return
    if kind == "flip_prob":         # the second chunk of /transition/probability
        flip_chunk(dst, "transition/probability", 1)
        return
    with h5py.File(dst, "r+") as f:
        if kind == "no_format":
            del f.attrs["sluice_format"]
        elif kind == "version3":
            f.attrs.modify("format_version", np.int64(3))
        elif kind == "n_states":
            f.attrs.modify("n_states", np.int64(int(f.attrs["n_states"]) + 1))
        elif kind == "first_pair":  # state 10 ends before it begins
            d = f["state/first_pair"]
            a, b = int(d[10]), int(d[11])
            d[10], d[11] = b, a
        elif kind == "target":
            f["transition/target"][7] = int(f.attrs["n_states"])
        elif kind == "reward":      # structurally valid, contents changed
            d = f["pair/reward"]
            d[5] = d[5] + 1.0
        elif kind in ("prob_range", "prob_sum"):
            # a pair with two or more successors past the model's middle:
            # prob_range sets 1.25 and 1 - 1.25 - rest (the sum stays 1),
            # prob_sum scales every probability of the pair by 0.9 (all in range)
            fpr, ft = f["state/first_pair"][...], f["pair/first_transition"][...]
            k = next(k for k in range(len(ft) // 2, len(ft) - 1) if ft[k + 1] - ft[k] >= 2)
            d = f["transition/probability"]
            p, t = d[...], int(ft[k])
            if kind == "prob_range":
                p[t], p[t + 1] = 1.25, 1.0 - 1.25 - float(np.sum(p[t + 2:ft[k + 1]]))
            else:
                p[t:ft[k + 1]] *= 0.9
            d[...] = p
            print("%s: state %d, action %d" % (kind, int(np.searchsorted(fpr, k, side="right") - 1),
                                               int(f["pair/action"][k])))
        else:
            sys.exit("damage.py: unknown kind " + kind)
        if refp:
            f.attrs.modify("fingerprint", np.bytes_(fingerprint(f)))

# damage.py --check FILE...: the port against sluice's stored fingerprint of
# each FILE (models with the optional datasets the reservoir lacks)
if sys.argv[1] == "--check":
    bad = 0
    for path in sys.argv[2:]:
        with h5py.File(path, "r") as f:
            mine, theirs = fingerprint(f), text(f.attrs["fingerprint"])
        print("%s %s: recomputed %s, stored %s" % ("ok" if mine == theirs else "MISMATCH", path, mine, theirs))
        bad += mine != theirs
    sys.exit(1 if bad else 0)

# first check the fingerprint port on the intact model; "refp" specs need it
src = sys.argv[1]
with h5py.File(src, "r") as f:
    mine, theirs = fingerprint(f), text(f.attrs["fingerprint"])
fp_ok = mine == theirs
print("fingerprint %s: recomputed %s, stored %s" % ("ok" if fp_ok else "MISMATCH", mine, theirs))
for spec in sys.argv[2:]:
    kind, dst = spec.split(":", 1)
    refp = dst.endswith(":refp")
    if refp:
        dst = dst[:-len(":refp")]
        if not fp_ok:
            continue
    make(kind, src, dst, refp)
EOF

# the port on models with /pair/visits (estimated from logged experience) and
# /terminal_value (a finite-horizon generator's terminal values): a change in
# how sluice hashes either makes these fail
expect "model: an estimated model (visit counts)" --code 0 -- \
    "$SLUICE" estimate -q "$SRC/tests/data/csv_garage_experience.csv" --discount 0.9 -o "$W/est.h5"
expect "model: a finite model with generator terminal values" --code 0 -- \
    "$SLUICE" build -q "$SRC/tests/data/gen_terminal.c" --objective finite -o "$W/term.h5"
if out=$("$PY" "$W/damage.py" --check "$W/est.h5" "$W/term.h5" 2>&1) &&
    [ "$(printf '%s\n' "$out" | grep -c '^ok ')" -eq 2 ]; then
    note_ok "model: the test's fingerprint port matches sluice's on /pair/visits and /terminal_value"
else
    note_fail "model: the test's fingerprint port matches sluice's on /pair/visits and /terminal_value" "$out"
fi

G=$W/good.h5
S=$W/sol.h5
expect "model: the reservoir example builds" --code 0 -- \
    "$SLUICE" build -q "$SRC/examples/reservoir.c" -o "$G"
expect "model: the good model's info" --code 0 --out "4320" -- "$SLUICE" info "$G"
expect "model: the good model solves" --code 0 -- "$SLUICE" solve -q "$G" -o "$W/good_sol.h5"
expect "model: the good solution verifies" --code 0 -- "$SLUICE" verify -q "$G" "$W/good_sol.h5"
specs=()
for k in no_format version3 n_states flip_reward flip_prob reward first_pair target; do
    specs+=("$k:$W/$k.h5")
done
specs+=("first_pair:$W/first_pairrefp.h5:refp" "target:$W/targetrefp.h5:refp" "foreign:$W/foreign.h5"
        "prob_range:$W/prob_rangerefp.h5:refp" "prob_sum:$W/prob_sumrefp.h5:refp")
if out=$("$PY" "$W/damage.py" "$G" "${specs[@]}" 2>&1) && [ "${out#fingerprint ok}" != "$out" ]; then
    note_ok "model: damaged copies made; the test's fingerprint port matches sluice's"
    HAVE_FP=1
else
    note_fail "model: damaged copies made; the test's fingerprint port matches sluice's" "$out"
    HAVE_FP=0
fi

# both: NAME FILE CODE-for-info CODE-for-solve WORD... : info and solve on FILE
both() {
    local name=$1 file=$2 ci=$3 cs=$4
    shift 4
    local e=()
    for k in "$@"; do e+=(--err "$k"); done
    expect "info: $name" --code "$ci" --err "$(basename "$file")" "${e[@]}" -- "$SLUICE" info "$file"
    expect "solve: $name" --code "$cs" --err "$(basename "$file")" "${e[@]}" --gone "$S" -- \
        "$SLUICE" solve -q "$file" -o "$S"
}

both "missing file" "$W/absent.h5" 66 66 "No such file"
echo "this is plain text, not HDF5" >"$W/text.h5"
both "non-HDF5 file" "$W/text.h5" 65 65 "not an HDF5 file"
both "HDF5 file that is not a sluice model" "$W/foreign.h5" 65 65 "sluice_format"
both "sluice model with /sluice_format removed" "$W/no_format.h5" 65 65 "sluice_format"
both "format_version 3" "$W/version3.h5" 65 65 "format_version 3" "newer"
cp "$G" "$W/half.h5" && truncate -s $(($(stat -c %s "$G") / 2)) "$W/half.h5"
both "truncated to half" "$W/half.h5" "65|74" "65|74" "truncated"
both "/n_states attribute inconsistent with the datasets" "$W/n_states.h5" 65 65 "n_states"

# data-level damage: info reads only the index arrays, so it may not see it;
# it must not crash, and solve must refuse.
expect "info: bytes flipped in a /pair/reward chunk (no crash)" --code "0|65" -- "$SLUICE" info "$W/flip_reward.h5"
expect "solve: bytes flipped in a /pair/reward chunk" --code 65 --err "flip_reward.h5" --gone "$S" -- \
    "$SLUICE" solve -q "$W/flip_reward.h5" -o "$S"
expect "info: bytes flipped in a /transition/probability chunk (no crash)" --code "0|65" -- \
    "$SLUICE" info "$W/flip_prob.h5"
expect "solve: bytes flipped in a /transition/probability chunk" --code 65 --err "flip_prob.h5" --gone "$S" -- \
    "$SLUICE" solve -q "$W/flip_prob.h5" -o "$S"

expect "solve: a reward edited, fingerprint not updated" --code 65 --err "reward.h5" --err "fingerprint" \
    --gone "$S" -- "$SLUICE" solve -q "$W/reward.h5" -o "$S"

# Without a fingerprint update either the fingerprint check or validation may
# report the damage (65, naming the file); with the fingerprint recomputed,
# validation must, in its own words.
expect "info: /state/first_pair not monotone" --code 65 --err "first_pair.h5" --err "first_pair" \
    -- "$SLUICE" info "$W/first_pair.h5"
expect "solve: /state/first_pair not monotone (fingerprint not updated)" --code 65 --err "first_pair.h5" \
    --gone "$S" -- "$SLUICE" solve -q "$W/first_pair.h5" -o "$S"
expect "info: next state out of range (no crash)" --code "0|65" -- "$SLUICE" info "$W/target.h5"
expect "solve: next state out of range (fingerprint not updated)" --code 65 --err "target.h5" \
    --gone "$S" -- "$SLUICE" solve -q "$W/target.h5" -o "$S"
if [ "$HAVE_FP" = 1 ]; then
    expect "solve: /state/first_pair not monotone (fingerprint recomputed)" --code 65 \
        --err "first_pairrefp.h5" --err "first_pair" --not "fingerprint" --gone "$S" -- \
        "$SLUICE" solve -q "$W/first_pairrefp.h5" -o "$S"
    # state 10 is the one whose pair range [first_pair[10], first_pair[11]) is reversed
    expect "solve: /state/first_pair not monotone names state 10" --code 65 --err "state 10:" \
        -- "$SLUICE" solve -q "$W/first_pairrefp.h5" -o "$S"
    # the reader's probability checks, each alone, on files whose fingerprint
    # is right: only the check itself can refuse them (exit 65, state named)
    sa=$(echo "$out" | sed -n 's/^prob_range: //p')
    expect "solve: a probability 1.25 in a pair that still sums to 1 (fingerprint recomputed)" --code 65 \
        --err "prob_rangerefp.h5" --err "${sa:-state ?}" --err "not in [0, 1]" --not "fingerprint" --gone "$S" -- \
        "$SLUICE" solve -q "$W/prob_rangerefp.h5" -o "$S"
    sa=$(echo "$out" | sed -n 's/^prob_sum: //p')
    expect "solve: the probabilities of one pair sum to 0.9 (fingerprint recomputed)" --code 65 \
        --err "prob_sumrefp.h5" --err "${sa:-state ?}" --err "sum to" --not "fingerprint" --gone "$S" -- \
        "$SLUICE" solve -q "$W/prob_sumrefp.h5" -o "$S"
    expect "solve: next state out of range (fingerprint recomputed)" --code 65 --err "targetrefp.h5" \
        --err "next state 4320" --not "fingerprint" --gone "$S" -- \
        "$SLUICE" solve -q "$W/targetrefp.h5" -o "$S"
fi

# nothing lost: a failed solve leaves an earlier solution at the output path as it was
cp "$W/good_sol.h5" "$W/kept_sol.h5"
expect "solve: a failed solve keeps the existing output file intact" --code 65 --err "target.h5" \
    --keep "$W/kept_sol.h5" -- "$SLUICE" solve -q "$W/target.h5" -o "$W/kept_sol.h5"

sl_finish
