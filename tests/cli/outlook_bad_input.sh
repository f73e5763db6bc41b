# outlook_bad_input.sh - `sluice outlook` on bad input: a start outside the
# model or naming unknown factors/labels, bad start-distribution CSVs (line
# named), a model/solution mismatch, an unwritable output; each a clear
# error, the sysexits code and no output file. Also the good paths: CSV and
# JSON files written atomically, a format 1 model (no quantities) works.
# usage: bash outlook_bad_input.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

RES=$SRC/examples/reservoir.c
P="--param storage_levels=13 --param inflow_classes=3 --param release_levels=5"
expect "build reservoir" --code 0 -- "$SLUICE" build -q "$RES" $P -o "$W/res.h5"
expect "solve reservoir" --code 0 -- "$SLUICE" solve -q "$W/res.h5" -o "$W/sol.h5"
expect "build another reservoir" --code 0 -- "$SLUICE" build -q "$RES" $P --param capacity=900 -o "$W/res2.h5"
expect "build a format 1 pond" --code 0 -- "$SLUICE" build -q "$DATA/gen_bad_units.c" --param mode=8 -o "$W/pond1.h5"
expect "solve the pond" --code 0 -- "$SLUICE" solve -q "$W/pond1.h5" -o "$W/pond1_sol.h5"

O=$W/out.csv
T=("$SLUICE" outlook "$W/res.h5" "$W/sol.h5" --stages 5)
expect "good outlook to CSV" --code 0 --clean "$O" -- "${T[@]}" --start 7 -o "$O"
expect "good outlook to JSON file" --code 0 --clean "$W/o.json" -- "${T[@]}" --start 7 --json -o "$W/o.json"
expect "terminal output carries units and the caution" --code 0 --out "storage [hm3]" --out "spill [hm3]" \
    --out "licensed engineering judgement" -- "${T[@]}" --start storage@3,inflow@1,month=Feb
expect "format 1 model: outlook without quantities" --code 0 --out "discounted reward" -- \
    "$SLUICE" outlook "$W/pond1.h5" "$W/pond1_sol.h5" --stages 3 --start level@1,season@0
expect "start number outside the model" --code 64 --err "--start 468" --err "0..467" --gone "$O" -- \
    "${T[@]}" --start 468 -o "$O"
expect "start with an unknown factor" --code 64 --err "depth" --err "factors: storage, inflow, month" --gone "$O" -- \
    "${T[@]}" --start depth@1,inflow@1,month=Jan -o "$O"
expect "start missing a factor" --code 64 --err "month is missing" --gone "$O" -- \
    "${T[@]}" --start storage@1,inflow@1 -o "$O"
expect "start with an unknown month label" --code 64 --err "'Mai'" --gone "$O" -- \
    "${T[@]}" --start storage@1,inflow@1,month=Mai -o "$O"
expect "both --start and --start-distribution" --code 64 --err "exactly one" --gone "$O" -- \
    "${T[@]}" --start 1 --start-distribution "$W/none.csv" -o "$O"
expect "negative --stages" --code 64 --err "--stages" --gone "$O" -- \
    "$SLUICE" outlook "$W/res.h5" "$W/sol.h5" --stages -1 --start 1 -o "$O"
printf 'state,probability\n1,0.5\n2,0.4\n' > "$W/sum.csv"
expect "distribution not summing to 1" --code 65 --err "sum.csv" --err "0.9" --gone "$O" -- \
    "${T[@]}" --start-distribution "$W/sum.csv" -o "$O"
printf 'state,probability\n1,0.5\n999,0.5\n' > "$W/range.csv"
expect "distribution with a state outside the model" --code 65 --err "range.csv line 3" --err "999" --gone "$O" -- \
    "${T[@]}" --start-distribution "$W/range.csv" -o "$O"
printf 'state,probability\n1,half\n' > "$W/num.csv"
expect "distribution with a bad probability" --code 65 --err "num.csv line 2" --err "half" --gone "$O" -- \
    "${T[@]}" --start-distribution "$W/num.csv" -o "$O"
printf 'storage,inflow,month,probability\n0,@1,Jan,0.25\n150,@1,Jan,0.75\n' > "$W/fac.csv"
expect "distribution by factor labels: value not on the grid" --code 65 --err "fac.csv line 3" --err "150" \
    --gone "$O" -- "${T[@]}" --start-distribution "$W/fac.csv" -o "$O"
printf 'storage,inflow,month,probability\n0,@1,Jan,0.25\n@4,@1,Jan,0.75\n' > "$W/fac2.csv"
expect "distribution by factor labels" --code 0 --clean "$O" -- "${T[@]}" --start-distribution "$W/fac2.csv" -o "$O"
# spaces around every field, also before a comma (once kept in the field)
printf 'storage,inflow ,month,probability\n0 ,@1 , Jan ,0.25\n @4,@1,Jan\t,0.75\n' > "$W/fac3.csv"
expect "distribution by factor labels with spaces" --code 0 --clean "$O" -- "${T[@]}" --start-distribution \
    "$W/fac3.csv" -o "$O"
printf 'storage,probability\n0,1\n' > "$W/hdr.csv"
expect "distribution with a bad header" --code 65 --err "hdr.csv line 1" --gone "$O" -- \
    "${T[@]}" --start-distribution "$W/hdr.csv" -o "$O"
expect "missing distribution file" --code 66 --err "nofile.csv" --gone "$O" -- \
    "${T[@]}" --start-distribution "$W/nofile.csv" -o "$O"
expect "model/solution mismatch" --code 65 --err "different model" --gone "$O" -- \
    "$SLUICE" outlook "$W/res2.h5" "$W/sol.h5" --stages 3 --start 1 -o "$O"
expect "output into a missing directory" --code 73 --err "nodir/o.csv" --gone "$W/nodir/o.csv" -- \
    "${T[@]}" --start 1 -o "$W/nodir/o.csv"
sl_finish
