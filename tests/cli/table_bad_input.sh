# table_bad_input.sh - `sluice table` on bad input: unknown factor or
# quantity names, a --fix value not on the grid, marginal of a factor without
# numeric values, a model/solution mismatch, quantities asked of a format 1
# model, an unwritable output: each a clear error naming the thing, the
# sysexits code, and no output file left behind.
# usage: bash table_bad_input.sh SLUICE_BINARY WORKDIR SOURCE_DIR
. "$(dirname "$0")/lib.sh"
sl_setup "$@"

RES=$SRC/examples/reservoir.c
P="--param storage_levels=13 --param inflow_classes=3 --param release_levels=5"
expect "build reservoir" --code 0 -- "$SLUICE" build -q "$RES" $P -o "$W/res.h5"
expect "solve reservoir" --code 0 -- "$SLUICE" solve -q "$W/res.h5" -o "$W/sol.h5"
expect "build another reservoir" --code 0 -- "$SLUICE" build -q "$RES" $P --param capacity=900 -o "$W/res2.h5"
expect "build a format 1 pond" --code 0 -- "$SLUICE" build -q "$DATA/gen_bad_units.c" --param mode=8 -o "$W/pond1.h5"
expect "solve the pond" --code 0 -- "$SLUICE" solve -q "$W/pond1.h5" -o "$W/pond1_sol.h5"

T=("$SLUICE" table "$W/sol.h5" --model "$W/res.h5")
O=$W/table.csv
expect "good table to CSV" --code 0 --clean "$O" -- "${T[@]}" --rows storage --cols month --fix inflow@1 -o "$O"
expect "good table on the terminal carries the caution" --code 0 --out "licensed engineering judgement" \
    --out "storage [hm3]" --out "[hm3/month]" -- "${T[@]}" --rows storage --cols month --fix inflow@1
expect "unknown row factor" --code 64 --err "level" --err "no such factor" --gone "$O" -- \
    "${T[@]}" --rows level --cols month --fix inflow@1 -o "$O"
expect "unknown --fix factor" --code 64 --err "'inflw'" --err "factors: storage, inflow, month" --gone "$O" -- \
    "${T[@]}" --rows storage --cols month --fix inflw=2 -o "$O"
expect "unknown quantity" --code 64 --err "--show spil" --err "spill" --gone "$O" -- \
    "${T[@]}" --rows storage --cols month --fix inflow@1 --show spil -o "$O"
expect "--fix value not on the grid" --code 64 --err "inflow = 77" --err "not on the grid" --err "nearest" \
    --gone "$O" -- "${T[@]}" --rows storage --cols month --fix inflow=77 -o "$O"
expect "--fix index out of range" --code 64 --err "inflow" --err "0..2" --gone "$O" -- \
    "${T[@]}" --rows storage --cols month --fix inflow@3 -o "$O"
expect "--fix label unknown" --code 64 --err "'Janvier'" --err "month" --gone "$O" -- \
    "${T[@]}" --rows storage --cols inflow --fix month=Janvier -o "$O"
expect "factor left unfixed" --code 64 --err "inflow must be fixed" --gone "$O" -- \
    "${T[@]}" --rows storage --cols month -o "$O"
expect "marginal of a factor with labels only" --code 64 --err "month" --err "no numeric values" --gone "$O" -- \
    "${T[@]}" --rows storage --cols month --fix inflow@1 --show marginal:month -o "$O"
expect "marginal of an unknown factor" --code 64 --err "marginal:depth" --err "no factor 'depth'" --gone "$O" -- \
    "${T[@]}" --rows storage --cols month --fix inflow@1 --show marginal:depth -o "$O"
expect "model/solution mismatch" --code 65 --err "different model" --err "res2.h5" --gone "$O" -- \
    "$SLUICE" table "$W/sol.h5" --model "$W/res2.h5" --rows storage --cols month --fix inflow@1 -o "$O"
expect "quantities of a format 1 model" --code 64 --err "no outcome quantities" --err "format 1" --gone "$O" -- \
    "$SLUICE" table "$W/pond1_sol.h5" --model "$W/pond1.h5" --rows level --cols season --show overflow -o "$O"
expect "format 1 model: action table by index" --code 0 --out "level \\ season" -- \
    "$SLUICE" table "$W/pond1_sol.h5" --model "$W/pond1.h5" --rows level --cols season
expect "missing solution file" --code 66 --err "nosuch.h5" --gone "$O" -- \
    "$SLUICE" table "$W/nosuch.h5" --model "$W/res.h5" --rows storage --cols month --fix inflow@1 -o "$O"
mkdir -p "$W/ro" && chmod 555 "$W/ro"
if [ "$(id -u)" = 0 ]; then
    echo "skip - unwritable output directory (root can write anywhere)"
else
    expect "unwritable output" --code 73 --err "ro/t.csv" --gone "$W/ro/t.csv" -- \
        "${T[@]}" --rows storage --cols month --fix inflow@1 -o "$W/ro/t.csv"
fi
expect "output into a missing directory" --code 73 --err "nodir/t.csv" --gone "$W/nodir/t.csv" -- \
    "${T[@]}" --rows storage --cols month --fix inflow@1 -o "$W/nodir/t.csv"
sl_finish
