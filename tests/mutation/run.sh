#!/usr/bin/env bash
# tests/mutation/run.sh - break the code on purpose, one mutation at a time,
# and show that the test suite notices.
#
#   tests/mutation/run.sh [WORKDIR] [ID...]
#
# Copies the working tree (tracked files, as they are now) to WORKDIR/src
# [default /tmp/sluice-mutation], builds it once in WORKDIR/build, checks that
# every subset named below passes on the unmodified code, then for each
# mutation: replaces one exact piece of source (it must occur exactly once),
# rebuilds, runs that mutation's subset of CTest tests, and restores the file.
# A mutation is "caught" when the subset fails. Prints one line per mutation
# and the score; exits 1 if any mutation survived or the baseline failed.
# Each mutation flips a bound, a comparison or a validation check that a
# named test is there to guard. Runs are long (minutes per mutation): use
# `nice` on a shared machine, and ID arguments (M1 M7 ...) to run a few.
set -u
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
W=${1:-/tmp/sluice-mutation}
shift || true
only=" $* "
S=$W/src
B=$W/build
export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1

# ID~file~exact text~replacement~CTest regex of the subset that must fail~what the mutation breaks[~ENV=VALUE for the subset]
mutations() {
cat <<'M'
M1~src/solve/kernel.c~c->value_error = 0.5 * f * c->span + fp;~c->value_error = 0.005 * f * c->span + fp;~^py_certificate$~solve's certificate: value bound 100x too small
M2~src/solve/kernel.c~c->policy_loss = f * c->span;~c->policy_loss = 0.01 * f * c->span;~^py_certificate$~solve's certificate: policy-loss bound 100x too small
M3~src/model/model.c~if (!(p >= 0.0 && p <= 1.0))~if (0)~^cli_bad_input_(datasets|files)$~model reader: probability range check removed~SL_FAIL_FAST=1
M4~src/model/model.c~if (fabs(sum - 1.0) > tol)~if (0)~^cli_bad_input_(datasets|files)$~model reader: probability sum check removed~SL_FAIL_FAST=1
M5~src/model/model.c~if (p1 < p0)~if (p1 < p0 - 1000000)~^fuzz_validate$~block validation: decreasing /state/first_pair accepted
M6~src/model/model.c~b->target[t] < 0 || b->target[t] >= m->n_states~b->target[t] < 0 || b->target[t] > m->n_states~^cli_bad_input_(datasets|files)$~model reader: off-by-one in the next-state bound~SL_FAIL_FAST=1
M7~src/store/h5.c~} else if (H5Tget_class(t) != cls) {~} else if (0) {~^cli_bad_input_datasets$~model reader: dataset class check removed~SL_FAIL_FAST=1
M8~src/solve/methods.c~if (r->ctx->signal_flag) flag = *r->ctx->signal_flag;~if (r->ctx->signal_flag && (r->S.iteration & 1)) flag = *r->ctx->signal_flag;~^py_signal_boundary$~solver: acts on a signal only at every other sweep boundary
M9~src/solve/methods.c~due = r->o->walltime - margin;~due = r->o->walltime - 0.5 * margin;~^cli_checkpoint_signals$~solver: --walltime stop due with half the documented margin~CK_SIGNALS_QUICK=1
M10~src/store/checkpoint.c~if (st == SL_OK && ver > SLUICE_FORMAT_VERSION) {~if (st == SL_OK && ver > SLUICE_FORMAT_VERSION + 1) {~^cli_bad_input_datasets$~checkpoint of a newer format accepted~SL_FAIL_FAST=1
M11~src/store/checkpoint.c~if (strcmp(a, cvs) != 0 || strcmp(b, cps) != 0)~if (0)~^cli_checkpoint_corrupt$~checkpoint checksums not compared
M12~src/store/checkpoint.c~if (fcntl(*fd, F_SETLK, &lk) != 0) {~if (0) {~^cli_bad_input_datasets$~checkpoint directory lock never refused~SL_FAIL_FAST=1
M13~src/solve/evaluate.c~out->certified = verr <= tol && loss <= tol;~out->certified = verr <= 100 * tol && loss <= 100 * tol;~^py_bounds$~verify: certifies at 100x the tolerance
M14~src/solve/evaluate.c~verr = sl_max(ctx, verr) + (1.0 + 2.0 * f) * fp;~verr = 0.01 * sl_max(ctx, verr) + (1.0 + 2.0 * f) * fp;~^py_bounds$~verify: value bound 100x too small
M15~src/solve/evaluate.c~loss = sl_max(ctx, loss) + 2.0 * f * fp + fp;~loss = 0.01 * sl_max(ctx, loss) + 2.0 * f * fp + fp;~^py_bounds$~verify: policy-loss bound 100x too small
M16~src/solve/evaluate.c~double e = fmax(fabs(d + f * c.dmin), fabs(d + f * c.dmax));~double e = fmin(fabs(d + f * c.dmin), fabs(d + f * c.dmax));~^py_bounds$~verify: value bound takes the nearer end of the interval (a flipped comparison)
M17~src/solve/evaluate.c~c.value_error = sl_policy_residual_bound(ctx, &P, x, pol) / (1.0 - P.gamma)~c.value_error = 0.01 * sl_policy_residual_bound(ctx, &P, x, pol) / (1.0 - P.gamma)~^py_bounds$~direct evaluate: error bound 100x too small
M18~src/solve/evaluate.c~if (c->value_error <= tol) {~if (c->value_error <= 100 * tol) {~^py_evaluate$~iterative evaluate: stops at 100x its tolerance
M19~src/cli/signals.c~if (sigprocmask(SIG_UNBLOCK, &set, NULL) != 0) ok = 0;~if (0) ok = 0;~^cli_bad_input_more$~solve: start-up signals inherited as blocked stay blocked
M20~src/cli/cmd_solve.c~    if (out[0] == 0.0) return 0;~    return 0;~^cli_bad_input_more$~solve: a stop requested during start-up is not noticed before solving
M21~src/core/core.c~while ((e = fallocate(fd, FALLOC_FL_KEEP_SIZE, 0, len) == 0 ? 0 : errno) == EINTR) continue;~e = EOPNOTSUPP;~^cli_bad_input_more$~writers: no disk space reserved before writing (the write fails when another program fills the disk)
M22~src/store/h5.c~    divert_to_memory(tmp_path);~    (void)tmp_path;~^cli_bad_input_more$~writers: a failed file closed without diverting HDF5's last flush (the exit-139 crash)
M23~src/store/content.c~        if (!isfinite(value[i]))~        if (!isfinite(value[i]) && i + 1 < n)~^fuzz_solution$~saved-result loaders: the last state's value not checked for being finite
M24~src/store/content.c~    if (length == n_states) return SL_OK;~    if (length >= n_states) return SL_OK;~^fuzz_solution$~saved-result loaders: a dataset longer than the model's states accepted
M25~src/model/model.c~    for (int64_t q = first_pair[i] - p_begin; q < first_pair[i + 1] - p_begin; q++)~    for (int64_t q = first_pair[i] - p_begin; q <= first_pair[i + 1] - p_begin; q++)~^fuzz_solution$~policy check: an action of the next state's first pair counted as offered
M
}

log() { echo "$*" | tee -a "$W/mutation.log"; }

mkdir -p "$W"
: >"$W/mutation.log"
# a second run reuses WORKDIR: tar keeps the files' times, so only what
# changed since is rebuilt
mkdir -p "$S"
(cd "$root" && git ls-files -z | xargs -0 tar -cf - 2>/dev/null) | tar -xf - -C "$S" || { echo "copy failed"; exit 1; }
# files the tree no longer tracks (moved, removed) must not stay in the copy
(cd "$root" && git ls-files) | sort >"$W/tracked"
(cd "$S" && find . -type f | sed 's|^\./||' | sort) | comm -23 - "$W/tracked" | (cd "$S" && xargs -r rm -f)
cmake -S "$S" -B "$B" -DCMAKE_BUILD_TYPE=RelWithDebInfo -DSLUICE_WERROR=OFF >"$W/cmake.log" 2>&1 &&
    nice cmake --build "$B" -j2 >"$W/build.log" 2>&1 || { echo "baseline build failed: $W/build.log"; exit 1; }

# baseline: every subset passes on the unmodified code
subsets=$(mutations | awk -F'~' -v only="$only" 'only == "  " || index(only, " " $1 " ") { print $5 "~" $7 }' | sort -u)
for sub in $subsets; do
    re=${sub%%~*} envs=${sub#*~}
    if (cd "$B" && env $envs nice ctest -R "$re" >"$W/baseline.$(echo "$sub" | tr -c 'a-zA-Z0-9' _).log" 2>&1); then
        log "baseline ok: $re${envs:+ ($envs)}"
    else
        log "BASELINE FAILS: $re${envs:+ ($envs)} (see $W/baseline.*.log); a mutation score would mean nothing"
        exit 1
    fi
done

caught=0 survived=0 total=0
while IFS='~' read -r id file old new re what envs; do
    [ -n "$id" ] || continue
    case $only in "  ") ;; *" $id "*) ;; *) continue ;; esac
    cp -p "$S/$file" "$W/orig"
    if ! /usr/bin/python3 - "$S/$file" "$old" "$new" <<'PY'
import sys
p, old, new = sys.argv[1:4]
s = open(p).read()
n = s.count(old)
if n != 1:
    sys.exit("%s: the text occurs %d times, expected once: %s" % (p, n, old))
open(p, "w").write(s.replace(old, new))
PY
    then
        log "$id SKIPPED (mutation does not apply): $what"
        continue
    fi
    total=$((total + 1))
    if ! nice cmake --build "$B" -j2 >"$W/$id.build.log" 2>&1; then
        log "$id caught by the compiler: $what"
        caught=$((caught + 1))
    elif (cd "$B" && env $envs nice ctest -R "$re" --output-on-failure >"$W/$id.ctest.log" 2>&1); then
        log "$id SURVIVED ($re passed): $what"
        survived=$((survived + 1))
    else
        failed=$(grep -E "^\s+[0-9]+ - " "$W/$id.ctest.log" | awk '{print $3}' | tr '\n' ' ')
        first=$(grep -m1 -E "not ok|FAIL|Error|assert" "$W/$id.ctest.log" | cut -c1-160)
        log "$id caught by ${failed:-$re}: $what  [$first]"
        caught=$((caught + 1))
    fi
    cp -p "$W/orig" "$S/$file"
    touch "$S/$file" # rebuilt next time, with the original text
done < <(mutations)
nice cmake --build "$B" -j2 >/dev/null 2>&1
log "mutation score: $caught of $total caught, $survived survived"
[ "$survived" -eq 0 ] && [ "$total" -gt 0 ]
