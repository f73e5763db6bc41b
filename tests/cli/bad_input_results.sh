# bad_input_results.sh - bad input to the planner-facing results of issue 9
# beyond table/outlook: a rule given to `evaluate --compare` as a CSV of
# actions by state labels (unknown labels or actions, missing or repeated
# states, an action the state does not offer, a bad header), the same rule
# given as --policy to evaluate, outlook and simulate, and `simulate`'s new
# options (-o per-stage table, --start-distribution). Each a clear error naming the file and line (or the state),
# the sysexits code, and no output left behind.
# usage: bash bad_input_results.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

RES=$SRC/examples/reservoir.c
P="--param storage_levels=5 --param inflow_classes=2 --param release_levels=3"
expect "setup: build a small reservoir" --code 0 -- "$SLUICE" build -q "$RES" $P -o "$W/res.h5"
expect "setup: solve it" --code 0 -- "$SLUICE" solve -q "$W/res.h5" -o "$W/sol.h5"
expect "setup: export it" --code 0 -- "$SLUICE" export "$W/sol.h5" --model "$W/res.h5" -o "$W/x.csv"
# a good rule: every state by its labels, the smallest release
"$PY" - "$W/x.csv" "$W/good.csv" <<'PYEOF'
import csv, sys
rows = list(csv.reader(open(sys.argv[1])))
c = {k: i for i, k in enumerate(rows[0])}
with open(sys.argv[2], "w") as f:
    f.write("storage,inflow,month,action\n")
    for r in rows[1:]:
        f.write("%s,%s,%s,release_0\n" % (r[c["storage [hm3]"]], r[c["inflow [hm3/month]"]], r[c["month"]]))
PYEOF
E=("$SLUICE" evaluate "$W/res.h5" --policy "$W/sol.h5" -o "$W/v.h5")
O=$W/totals.csv
expect "setup: a rule by labels evaluates" --code 0 --clean "$O" -- "${E[@]}" --compare "$W/good.csv" --totals "$O"
# line 3 gets an unknown month, an unknown action, ...
mk() { awk -v n="$2" -v r="$3" 'NR == n {print r; next} {print}' "$W/good.csv" > "$W/$1"; }
line3=$(sed -n 3p "$W/good.csv")
mk lab.csv 3 "$(echo "$line3" | sed 's/,Jan,/,Janvier,/')"
expect "rule CSV: unknown label" --code 65 --err "lab.csv line 3" --err "Janvier" --gone "$O" --gone "$W/v.h5" -- \
    "${E[@]}" --compare "$W/lab.csv" --totals "$O"
mk act.csv 3 "$(echo "$line3" | sed 's/release_0$/open_gates/')"
expect "rule CSV: unknown action" --code 65 --err "act.csv line 3" --err "open_gates" --gone "$O" --gone "$W/v.h5" -- \
    "${E[@]}" --compare "$W/act.csv" --totals "$O"
mk off.csv 3 "$(echo "$line3" | sed 's/^[^,]*,/77,/')"
expect "rule CSV: storage value not on the grid" --code 65 --err "off.csv line 3" --err "77" --gone "$O" --gone "$W/v.h5" -- \
    "${E[@]}" --compare "$W/off.csv" --totals "$O"
sed 4d "$W/good.csv" > "$W/miss.csv"
expect "rule CSV: a state without a row" --code 65 --err "miss.csv" --err "no row for state" --err "month=" \
    --gone "$O" --gone "$W/v.h5" -- "${E[@]}" --compare "$W/miss.csv" --totals "$O"
mk dup.csv 4 "$line3"
expect "rule CSV: a state given twice" --code 65 --err "dup.csv line 4" --err "twice" --err "line 3" --gone "$O" --gone "$W/v.h5" -- \
    "${E[@]}" --compare "$W/dup.csv" --totals "$O"
# a NUL byte inside line 3 (a binary file, a bad editor): said as such, not
# "line too long" nor a state read only up to the NUL
{ sed -n 1,2p "$W/good.csv"; printf '%s' "${line3%%,*}"; printf '\0'; printf '%s\n' "${line3#*,}"; sed -n '4,$p' "$W/good.csv"; } >"$W/nul.csv"
expect "rule CSV: a NUL byte in line 3" --code 65 --err "nul.csv line 3" --err "NUL byte" --not "too long" \
    --gone "$O" --gone "$W/v.h5" -- "${E[@]}" --compare "$W/nul.csv" --totals "$O"
sed '1s/action/release/' "$W/good.csv" > "$W/hdr.csv"
expect "rule CSV: bad header" --code 65 --err "hdr.csv line 1" --err "'action'" --gone "$O" --gone "$W/v.h5" -- \
    "${E[@]}" --compare "$W/hdr.csv" --totals "$O"
# the largest release is not offered in the empty reservoir (state 0)
big=$("$PY" -c "import h5py; print(h5py.File('$W/res.h5')['labels/action_name'][-1].decode())")
mk na.csv 2 "$(sed -n 2p "$W/good.csv" | sed "s/release_0\$/$big/")"
expect "rule CSV: action not offered in its state" --code 65 --err "na.csv line 2" --err "$big" \
    --err "not available" --gone "$O" --gone "$W/v.h5" -- "${E[@]}" --compare "$W/na.csv" --totals "$O"
expect "rule CSV: missing file" --code 66 --err "none.csv" --gone "$O" --gone "$W/v.h5" -- \
    "${E[@]}" --compare "$W/none.csv" --totals "$O"

# the rule as the policy itself (--policy RULE.csv): one reader, so the same
# errors, and nothing written
OL=("$SLUICE" outlook "$W/res.h5" --start 0 --stages 3)
expect "setup: outlook under a good rule" --code 0 --out "a rule CSV, which has no values" -- \
    "${OL[@]}" --policy "$W/good.csv"
expect "outlook --policy: unknown action" --code 65 --err "act.csv line 3" --err "open_gates" --gone "$W/ol.csv" -- \
    "${OL[@]}" --policy "$W/act.csv" -o "$W/ol.csv"
expect "outlook --policy: action not offered in its state" --code 65 --err "na.csv line 2" --err "not available" \
    --gone "$W/ol.csv" -- "${OL[@]}" --policy "$W/na.csv" -o "$W/ol.csv"
expect "outlook --policy: a solution and a rule both given" --code 64 --err "given twice" -- \
    "${OL[@]}" "$W/sol.h5" --policy "$W/good.csv"
expect "evaluate --policy: a state without a row" --code 65 --err "miss.csv" --err "no row for state" --gone "$W/v.h5" -- \
    "$SLUICE" evaluate "$W/res.h5" --policy "$W/miss.csv" -o "$W/v.h5"
expect "evaluate --policy: missing rule file" --code 66 --err "none.csv" --gone "$W/v.h5" -- \
    "$SLUICE" evaluate "$W/res.h5" --policy "$W/none.csv" -o "$W/v.h5"
expect "table: --show value of a rule (no values)" --code 64 --err "good.csv is a rule CSV" --gone "$W/tb.csv" -- \
    "$SLUICE" table "$W/good.csv" --model "$W/res.h5" --rows storage --cols month --fix inflow@0 --show value \
    -o "$W/tb.csv"
SR=("$SLUICE" simulate "$W/res.h5" --episodes 10 --seed 1 --stages 3)
expect "simulate --policy: a state given twice" --code 65 --err "dup.csv line 4" --err "twice" --gone "$W/st.csv" \
    --gone "$W/t.csv" -- "${SR[@]}" --start 0 --policy "$W/dup.csv" -o "$W/st.csv" --trajectories "$W/t.csv"
expect "simulate -o: without --stages" --code 64 --err "needs --stages" --gone "$W/st.csv" -- \
    "$SLUICE" simulate "$W/res.h5" "$W/sol.h5" --start 0 --episodes 10 -o "$W/st.csv"
expect "simulate -o: into a missing directory" --code 73 --err "nodir/st.csv" --gone "$W/nodir/st.csv" -- \
    "${SR[@]}" "$W/sol.h5" --start 0 -o "$W/nodir/st.csv"
expect "simulate: both --start and --start-distribution" --code 64 --err "exactly one" -- \
    "${SR[@]}" "$W/sol.h5" --start 0 --start-distribution "$W/good.csv"
printf 'state,probability\n0,0.5\n1,0.4\n' > "$W/d09.csv"
expect "simulate --start-distribution: sums to 0.9" --code 65 --err "d09.csv" --err "sum to 0.9" --gone "$W/st.csv" -- \
    "${SR[@]}" "$W/sol.h5" --start-distribution "$W/d09.csv" -o "$W/st.csv"
printf 'state,probability\n0,0.5\n999999,0.5\n' > "$W/dst.csv"
expect "simulate --start-distribution: state outside the model" --code 65 --err "dst.csv line 3" --err "999999" \
    --gone "$W/st.csv" -- "${SR[@]}" "$W/sol.h5" --start-distribution "$W/dst.csv" -o "$W/st.csv"
printf 'state,probability\n0,0.5\n1,0.5\n' > "$W/d10.csv"
expect "setup: simulate a good rule from a start distribution, per-stage table" --code 0 --out "(a rule)" \
    --clean "$W/st.csv" -- "${SR[@]}" --policy "$W/good.csv" --start-distribution "$W/d10.csv" -o "$W/st.csv"
if [ "$(wc -l < "$W/st.csv")" -eq 5 ]; then note_ok "the per-stage table has a header and stages 0..3"; else
    note_fail "the per-stage table has a header and stages 0..3" "$(wc -l < "$W/st.csv") lines"; fi

S=("$SLUICE" simulate "$W/res.h5" "$W/sol.h5" --start 0 --episodes 10 --seed 1)
expect "simulate: unknown interval method" --code 64 --err "--interval" --err "wilson" -- "${S[@]}" --stages 3 \
    --interval wilson
expect "simulate: confidence outside (0, 1)" --code 64 --err "--confidence" -- "${S[@]}" --stages 3 --confidence 95
expect "simulate: trajectories into a missing directory" --code 73 --err "nodir/t.csv" --gone "$W/nodir/t.csv" -- \
    "${S[@]}" --stages 3 --trajectories "$W/nodir/t.csv"
expect "simulate: --trajectories with --replicates" --code 64 --err "--replicates" --gone "$W/t.csv" -- \
    "${S[@]}" --stages 3 --trajectories "$W/t.csv" --replicates 3
# positional arguments (one helper, cli_positional, for every command)
expect "verify: an extra argument" --code 64 --err "unexpected argument 'extra.h5'" -- \
    "$SLUICE" verify "$W/res.h5" "$W/sol.h5" extra.h5
expect "simulate: an unknown option" --code 64 --err "unknown option '--episode'" -- "${S[@]}" --episode 5
expect "outlook: MODEL and SOLUTION in order" --code 0 --out "exact, no sampling" -- \
    "$SLUICE" outlook "$W/res.h5" "$W/sol.h5" --start 0 --stages 2
expect "outlook: SOLUTION and MODEL swapped" --code 65 --err "sol.h5" -- \
    "$SLUICE" outlook "$W/sol.h5" "$W/res.h5" --start 0 --stages 2
sl_finish
