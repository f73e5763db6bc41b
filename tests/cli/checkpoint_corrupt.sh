#!/bin/bash
# checkpoint_corrupt.sh SLUICE_BINARY WORKDIR SOURCE_DIR
#
# Damaged, foreign and failed checkpoints. Two checkpoints (iterations 300
# and 600 of a Jacobi solve) are made once and copied into a fresh directory
# for each case:
#   newest truncated / value bytes flipped / policy bytes flipped / one
#   value or policy entry rewritten through HDF5 (only the checksums can
#   tell) / an attribute byte changed / complete mark cleared / empty file
#       --resume uses the older one (log: resumed at iteration 300) and warns
#       on stderr naming both files; the damaged file is moved aside to
#       ckpt-000002.h5.unusable and never used again (a later damaged
#       checkpoint still falls back to a valid one), and the resumed run
#       ends bitwise equal to an uninterrupted run
#   both damaged    exit 65, "no usable checkpoint", no fresh start, no
#                   solution written, both files left as they were
#   another model's checkpoint (same size, other fingerprint)  exit 65 "another model"
#   SLUICE_FAULT_CKPT=N (write N fails half-way)  exit 74, the earlier
#       checkpoints byte-identical, no ckpt of sequence N, no temporary left;
#       resuming afterwards works (also for a failure in the middle of a run)
#   disk full (a 100 kB tmpfs; fails if mount is not permitted)   exit 74,
#       the earlier checkpoint byte-identical, no temporary left, resume works

. "$(dirname "$0")/lib_ckpt.sh"
ck_init "$@"

ck_build_reservoir m.h5 || { ck_not_ok "build the reservoir model"; ck_finish; }
SOLVE=(solve m.h5 --method jacobi --tolerance 1e-6 --progress-every 1000)

"$SLUICE" "${SOLVE[@]}" -o ref.h5 >ref.log 2>&1
ck_rc "uninterrupted reference solve" 0 $? ref.log
"$SLUICE" "${SOLVE[@]}" -o x.h5 --checkpoint base --max-iterations 300 >base1.log 2>&1
rc1=$?
"$SLUICE" "${SOLVE[@]}" -o x.h5 --checkpoint base --resume --max-iterations 600 >base2.log 2>&1
rc2=$?
if [ $rc1 -ne 75 ] || [ $rc2 -ne 75 ] || [ ! -f base/ckpt-000001.h5 ] || [ ! -f base/ckpt-000002.h5 ]; then
    ck_not_ok "make two checkpoints (--max-iterations 300, then 600)" "exits $rc1 $rc2; $(ls base 2>&1 | tr '\n' ' ')"
    ck_finish
fi
ck_ok "two checkpoints made: iterations $(ck_tool attr base/ckpt-000001.h5 iteration) and $(ck_tool attr base/ckpt-000002.h5 iteration)"

# fresh DIR: DIR holds copies of the two checkpoints
fresh() {
    rm -rf "$1" && mkdir -p "$1" && cp base/ckpt-000001.h5 base/ckpt-000002.h5 "$1/"
}

# resume DIR LOG ARGS...: solve --resume from DIR; exit status in $rc
resume() {
    local dir=$1 log=$2
    shift 2
    "$SLUICE" "${SOLVE[@]}" --checkpoint "$dir" --resume "$@" >"$log" 2>&1 </dev/null
    rc=$?
}

# fallback_case TAG NAME DAMAGE_COMMAND...: damage c_TAG/ckpt-000002.h5, then
# check that --resume falls back to ckpt-000001.h5
fallback_case() {
    local dir=c_$1 name=$2 why=()
    shift 2
    fresh "$dir"
    "$@" "$dir/ckpt-000002.h5" >/dev/null || { ck_not_ok "$name: could not damage the file"; return; }
    resume "$dir" "$dir.log" -o "$dir.h5" --max-iterations 700
    [ $rc -eq 75 ] || why+=("exit $rc, expected 75 (stopped at --max-iterations 700)")
    grep -q "resumed at iteration 300," "$dir.log" || why+=("log does not say 'resumed at iteration 300'")
    grep -q "warning:.*ckpt-000002.h5.*ckpt-000001.h5" "$dir.log" ||
        why+=("no warning naming ckpt-000002.h5 and ckpt-000001.h5")
    [ -e "$dir/ckpt-000002.h5.unusable" ] && [ ! -e "$dir/ckpt-000002.h5" ] ||
        why+=("the damaged file was not moved aside to ckpt-000002.h5.unusable")
    if [ ${#why[@]} -eq 0 ]; then
        ck_ok "$name: --resume fell back to the older checkpoint: $(grep -m1 "warning:" "$dir.log" | cut -c1-200)"
    else
        ck_not_ok "$name" "$(printf '%s; ' "${why[@]}")"
        sed -n '1,6s/^/#   /p' "$dir.log"
    fi
}

trunc_half() { truncate -s $(($(stat -c %s "$1") / 2)) "$1"; }
flip_value() { ck_tool flip "$1" /value; }
flip_policy() { ck_tool flip "$1" /policy; }
flip_iteration() { ck_tool flip_attr "$1" iteration; }
clear_complete() { ck_tool set_attr "$1" complete 0; }
rewrite_value() { ck_tool set_value "$1" /value 100 0.25; }
rewrite_policy() { ck_tool set_value "$1" /policy 100 0; }
empty_file() { : >"$1"; }

fallback_case trunc "newest truncated to half its size" trunc_half
fallback_case value "8 bytes of the newest's /value data flipped" flip_value
fallback_case policy "8 bytes of the newest's /policy data flipped" flip_policy
fallback_case attr "one byte of the newest's iteration attribute changed" flip_iteration
fallback_case rval "one /value entry of the newest rewritten (readable file, stale checksum)" rewrite_value
fallback_case rpol "one /policy entry of the newest rewritten (readable file, stale checksum)" rewrite_policy
fallback_case mark "newest without its complete mark" clear_complete
fallback_case empty "newest is an empty file" empty_file

# The run that fell back wrote ckpt-000003.h5 (iteration 700). If that one is
# damaged too, a valid checkpoint must still be there to fall back to: the
# unusable ckpt-000002.h5 must not have been kept in place of ckpt-000001.h5.
d=c_trunc
ls "$d" >"$d.ls1"
if [ -f "$d/ckpt-000003.h5" ]; then
    trunc_half "$d/ckpt-000003.h5"
    resume "$d" "$d.again.log" -o again.h5 --max-iterations 800
    if [ $rc -eq 75 ] && grep -q "resumed at iteration" "$d.again.log"; then
        ck_ok "second damaged newest: fell back again ($(grep -m1 -o "resumed at iteration [0-9]*" "$d.again.log"))"
    else
        ck_not_ok "second damaged newest: exit $rc, no valid checkpoint left to fall back to" \
            "directory after the first fallback: $(tr '\n' ' ' <"$d.ls1")"
        sed -n '1,4s/^/#   /p' "$d.again.log"
    fi
    resume "$d" "$d.end.log" -o end.h5
    ck_rc "resume from there to the end" 0 $rc "$d.end.log"
    ck_check "the result after two fallbacks is bitwise equal to the uninterrupted run" ck_tool same ref.h5 end.h5
else
    ck_not_ok "the run that fell back did not write ckpt-000003.h5" "$(tr '\n' ' ' <"$d.ls1")"
fi

# ---- both damaged ---------------------------------------------------------------------
fresh c_both
trunc_half c_both/ckpt-000002.h5
flip_value c_both/ckpt-000001.h5 >/dev/null
s1=$(cksum <c_both/ckpt-000001.h5)
s2=$(cksum <c_both/ckpt-000002.h5)
rm -f both.h5
resume c_both both.log -o both.h5
why=()
[ $rc -eq 65 ] || why+=("exit $rc, expected 65")
grep -q "^sluice solve: .*no usable checkpoint" both.log || why+=("no 'no usable checkpoint' error line")
grep -q "starting fresh" both.log && why+=("it started fresh")
[ -e both.h5 ] && why+=("a solution was written")
[ "$(cksum <c_both/ckpt-000001.h5 2>&1)" = "$s1" ] && [ "$(cksum <c_both/ckpt-000002.h5 2>&1)" = "$s2" ] ||
    why+=("the damaged files were changed or removed")
if [ ${#why[@]} -eq 0 ]; then
    ck_ok "both damaged: exit 65: $(grep -m1 "^sluice solve:" both.log | cut -c1-220)"
else
    ck_not_ok "both damaged" "$(printf '%s; ' "${why[@]}")"
    sed -n '1,6s/^/#   /p' both.log
fi

# ---- another model's checkpoint ------------------------------------------------------------
ck_build_reservoir other.h5 --param price=60 || ck_not_ok "build the other model"
fp1=$(ck_tool attr m.h5 fingerprint)
fp2=$(ck_tool attr other.h5 fingerprint)
n1=$(ck_tool attr m.h5 n_states)
n2=$(ck_tool attr other.h5 n_states)
"$SLUICE" solve other.h5 -o o.h5 --method jacobi --checkpoint c_other --max-iterations 10 >other0.log 2>&1
s1=$(cksum <c_other/ckpt-000001.h5)
rm -f other_sol.h5
resume c_other other.log -o other_sol.h5
why=()
[ "$fp1" != "$fp2" ] && [ "$n1" = "$n2" ] || why+=("set-up: fingerprints $fp1 $fp2, states $n1 $n2")
[ $rc -eq 65 ] || why+=("exit $rc, expected 65")
grep -q "^sluice solve: .*another model" other.log || why+=("no 'another model' error line")
[ -e other_sol.h5 ] && why+=("a solution was written")
[ "$(cksum <c_other/ckpt-000001.h5)" = "$s1" ] || why+=("the other model's checkpoint was changed")
if [ ${#why[@]} -eq 0 ]; then
    ck_ok "another model's checkpoint ($n2 states, fingerprint $fp2): exit 65: $(grep -m1 "^sluice solve:" other.log | cut -c1-160)"
else
    ck_not_ok "another model's checkpoint" "$(printf '%s; ' "${why[@]}")"
    sed -n '1,4s/^/#   /p' other.log
fi

# ---- injected write failure ----------------------------------------------------------------
# intact DIR: ckpt-000001/2 byte-identical to the originals
intact() {
    cmp -s base/ckpt-000001.h5 "$1/ckpt-000001.h5" && cmp -s base/ckpt-000002.h5 "$1/ckpt-000002.h5"
}
# no_temps DIR: no temporary file left
no_temps() {
    local f
    for f in "$1"/.*.partial "$1"/*.partial; do
        [ -e "$f" ] && { echo "left: $f"; return 1; }
    done
    return 0
}

fresh c_fault
SLUICE_FAULT_CKPT=3 resume c_fault fault.log -o fault.h5 --max-iterations 700
why=()
[ $rc -eq 74 ] || why+=("exit $rc, expected 74")
grep -q "^sluice solve: .*ckpt-000003.h5.*injected" fault.log || why+=("no error line naming ckpt-000003.h5")
intact c_fault || why+=("ckpt-000001/2 changed")
[ -e c_fault/ckpt-000003.h5 ] && why+=("ckpt-000003.h5 exists")
no_temps c_fault >/dev/null || why+=("$(no_temps c_fault)")
if [ ${#why[@]} -eq 0 ]; then
    ck_ok "SLUICE_FAULT_CKPT=3: exit 74, earlier checkpoints intact: $(grep -m1 "^sluice solve:" fault.log | cut -c1-160)"
else
    ck_not_ok "SLUICE_FAULT_CKPT=3" "$(printf '%s; ' "${why[@]}")"
    sed -n '1,6s/^/#   /p' fault.log
fi
resume c_fault fault2.log -o fault2.h5 --max-iterations 700
if [ $rc -eq 75 ] && grep -q "resumed at iteration 600," fault2.log && ck_tool validate c_fault >/dev/null; then
    ck_ok "after the injected failure: resume from iteration 600 works and writes a valid checkpoint"
else
    ck_not_ok "after the injected failure: resume" "exit $rc"
    sed -n '1,4s/^/#   /p' fault2.log
fi

# a failure in the middle of a run with frequent checkpoints (the 6th write)
fresh c_fault6
SLUICE_FAULT_CKPT=6 resume c_fault6 fault6.log -o fault6.h5 --checkpoint-every 0.05
why=()
[ $rc -eq 74 ] || why+=("exit $rc, expected 74")
[ -e c_fault6/ckpt-000006.h5 ] && why+=("ckpt-000006.h5 exists")
[ -e c_fault6/ckpt-000005.h5 ] && [ -e c_fault6/ckpt-000004.h5 ] || why+=("ckpt-000004/5 missing: $(ls c_fault6 | tr '\n' ' ')")
ck_tool validate c_fault6 >/dev/null || why+=("$(ck_tool validate c_fault6 | tr '\n' ' ')")
no_temps c_fault6 >/dev/null || why+=("$(no_temps c_fault6)")
[ -e fault6.h5 ] && why+=("a solution was written")
if [ ${#why[@]} -eq 0 ]; then
    ck_ok "SLUICE_FAULT_CKPT=6 during a run: exit 74, ckpt-000004/5 valid, no ckpt-000006"
else
    ck_not_ok "SLUICE_FAULT_CKPT=6 during a run" "$(printf '%s; ' "${why[@]}")"
    sed -n '1,6s/^/#   /p' fault6.log
fi
resume c_fault6 fault6b.log -o fault6b.h5
ck_rc "after the mid-run failure: resume to the end ($(grep -m1 -o "resumed at iteration [0-9]*" fault6b.log))" 0 $rc fault6b.log
ck_check "after the mid-run failure: result bitwise equal to the uninterrupted run" ck_tool same ref.h5 fault6b.h5

# ---- disk full -------------------------------------------------------------------------------
mkdir -p small
if mount -t tmpfs -o size=100k sluice-test-tmpfs small 2>/dev/null; then
    trap 'umount "$W/small" 2>/dev/null' EXIT
    mkdir small/c && cp base/ckpt-000001.h5 small/c/
    used0=$(df -k --output=used small | tail -n 1)
    resume small/c full.log -o full.h5 --max-iterations 400
    used1=$(df -k --output=used small | tail -n 1)
    why=()
    [ $rc -eq 74 ] || why+=("exit $rc, expected 74")
    grep -q "^sluice solve: .*ckpt-000002.h5" full.log || why+=("no error line naming ckpt-000002.h5")
    cmp -s base/ckpt-000001.h5 small/c/ckpt-000001.h5 || why+=("ckpt-000001.h5 changed")
    [ -e small/c/ckpt-000002.h5 ] && why+=("ckpt-000002.h5 exists")
    no_temps small/c >/dev/null || why+=("$(no_temps small/c)")
    grep -qE "Segmentation|core dumped|Aborted" full.log && why+=("crashed")
    if [ ${#why[@]} -eq 0 ]; then
        ck_ok "disk full during a checkpoint (100 kB tmpfs, $used0 kB used before, $used1 kB after): exit 74: $(grep -m1 "^sluice solve:" full.log | cut -c1-160)"
    else
        ck_not_ok "disk full during a checkpoint" "$(printf '%s; ' "${why[@]}")"
        grep -v "mca_" full.log | sed -n '1,8s/^/#   /p'
    fi
    mount -o remount,size=1m small
    resume small/c full2.log -o full2.h5 --max-iterations 400
    if [ $rc -eq 75 ] && grep -q "resumed at iteration 300," full2.log && ck_tool validate small/c >/dev/null; then
        ck_ok "after freeing space: resume from iteration 300 works"
    else
        ck_not_ok "after freeing space: resume" "exit $rc"
    fi
    umount small
    trap - EXIT
else
    # not a silent skip: the README's test run is as root (tools/setup)
    ck_not_ok "disk-full case: cannot mount a tmpfs here (needs root / CAP_SYS_ADMIN)"
fi
ck_finish
