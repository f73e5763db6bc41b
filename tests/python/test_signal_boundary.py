#!/usr/bin/env python3
"""test_signal_boundary.py SLUICE WORKDIR - a stop or checkpoint signal is
acted on at the very next sweep boundary, checked deterministically.

The solver promises (docs/testing.md, "Tests do not time the machine") that a signal is acted on
at the first sweep boundary after it arrives. tests/cli/checkpoint_signals.sh
checks that promise on the solver's clock for signals sent at whatever moment
a busy machine delivers them, so a solver that looked at its flag only at
every other boundary would pass there whenever a signal happened to land
before a boundary it does look at (one chance in two per signal; the
mutation pass of 2026-12-02 measured 7 of 8 runs caught). Here the moment is
pinned: rank 0's log goes into a one-page pipe with room for the lines
through iteration j-1 and half of line j, so the solver blocks in the write
of the progress line of iteration j. Jacobi and modified policy iteration
write that line while checking iterate j, in the step that ends at boundary
j+1 (src/solve/methods.c: check, then iteration++). The signal is sent only
once /proc shows the process blocked in that write: the kernel runs the
handler before the write returns, so the flag is set before boundary j+1 in
every run, whatever the load. Boundaries j+1 even and odd, TERM (checkpoint
and stop, exit 75) and USR1 (checkpoint and go on, exit 0). Gauss-Seidel is
not among the methods: it logs only at the iterations it checks (1, 3, 7,
15, ...: all odd), so it cannot pin an even boundary. Asserted from the
solver's own log and files: the signal line names boundary j+1 and its
arrival lies between the previous boundary and the one acted on (solver
clock); the first checkpoint holds iteration j+1 (read with h5py). The model
is invented test data (mdp_common.random_mdp), no outside source: this
checks a promise of our own.
"""
import os
import re
import shutil
import signal
import subprocess
import sys
import time

import h5py

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import mdp_common as mc  # noqa: E402

ITER_LINE = re.compile(r"^\[[^]]*\] solve: iter (\d+) ", re.M)
SIGNAL_LINE = re.compile(r"solve: signal (\d+) \((\w+)\) arrived at (-?[\d.]+) s; acted on at the sweep boundary at "
                         r"(-?[\d.]+) s \(iteration (\d+); previous boundary (none \(first boundary\)|-?[\d.]+ s)\)")


def line_spans(log):
    """{k: (start, end)} byte offsets of the progress line of iteration k."""
    spans = {}
    for m in ITER_LINE.finditer(log):
        end = log.find("\n", m.start())
        spans[int(m.group(1))] = (m.start(), end + 1)
    return spans


def main():
    binary, work = mc.parse_args(sys.argv, "test_signal_boundary.py SLUICE WORKDIR")
    chk = mc.Checker("signal_boundary")
    # gamma 0.995 and a tight tolerance: far more iterations than the cases use
    mdp = mc.random_mdp(20261203, 400, 0.995, actions=(2, 4), successors=(2, 5))
    model = mc.import_model(binary, mdp, work, "m")
    for method in ("jacobi", "mpi"):
        base = ["solve", model, "--method", method, "--tolerance", "1e-8", "--progress-every", "1e-9"]
        ref = mc.run_sluice(binary, base + ["-o", os.path.join(work, "ref_%s.h5" % method)])
        spans = line_spans(ref.stderr)
        if not chk.check(all(k in spans for k in range(0, 9)),
                         "%s: the reference run logs a progress line for each of iterations 0-8" % method,
                         ref.stderr[:400]):
            continue
        for sig, j, want_rc in ((signal.SIGTERM, 3, mc.EXIT_STOPPED), (signal.SIGTERM, 4, mc.EXIT_STOPPED),
                                (signal.SIGUSR1, 5, mc.EXIT_OK), (signal.SIGUSR1, 6, mc.EXIT_OK)):
            b = j + 1  # the boundary that follows the write of line j
            tag = "%s, %s pinned before boundary %d" % (method, signal.Signals(sig).name, b)
            start, end = spans[j]
            room = start + (end - start) // 2  # line j cannot be written whole
            ck = os.path.join(work, "ck_%s_%d" % (method, j))
            shutil.rmtree(ck, ignore_errors=True)
            out = os.path.join(work, "out_%s_%d.h5" % (method, j))
            trigger = ("solve: iter %d " % (j - 1)).encode()
            rc, log, seen = mc.stop_when_logged(binary, 1, base + ["-o", out, "--checkpoint", ck], trigger, room, sig,
                                                blocked=True)
            if not chk.check(seen, "%s: the solver blocked in its log write of iteration %d" % (tag, j),
                             "exit %d; log %s" % (rc, log[-300:])):
                continue
            chk.check(rc == want_rc, "%s: exit %d" % (tag, want_rc), "exit %d" % rc)
            m = SIGNAL_LINE.search(log)
            if not chk.check(m is not None and int(m.group(1)) == int(sig),
                             "%s: the solver logs when the signal arrived and was acted on" % tag, log[-600:]):
                continue
            at, acted, it = float(m.group(3)), float(m.group(4)), int(m.group(5))
            prev = None if m.group(6).startswith("none") else float(m.group(6)[:-2])
            chk.check(it == b, "%s: acted on at boundary %d, the first after the signal" % (tag, b),
                      "acted on at iteration %d: %s" % (it, m.group(0)))
            chk.check(at <= acted and (prev is None or prev <= at),
                      "%s: arrival between the previous boundary and the one acted on (solver clock)" % tag,
                      m.group(0))
            names = mc.checkpoint_files(ck)
            if chk.check(len(names) >= 1, "%s: a checkpoint was written" % tag, "in %s: %s" % (ck, names)):
                with h5py.File(names[0], "r") as f:
                    got = int(mc._attr(f, "iteration"))
                chk.check(got == b, "%s: the first checkpoint holds iteration %d" % (tag, b),
                          "%s holds iteration %d" % (names[0], got))
    # a model whose solve lasts seconds, so that rank 1 can be found and signalled
    big = mc.import_model(binary, mc.random_mdp(20261204, 30000, 0.995, actions=(2, 4), successors=(2, 5)), work, "big")
    check_other_rank(chk, binary, work, big)
    chk.finish()


def descends_from(pid, ancestor):
    """True if process pid is ancestor or one of its descendants (/proc)."""
    while pid > 1:
        if pid == ancestor:
            return True
        try:
            with open("/proc/%d/stat" % pid) as f:
                pid = int(f.read().rsplit(")", 1)[1].split()[1])
        except (OSError, ValueError, IndexError):
            return False
    return False


def rank_pids(launcher_pid, binary, rank):
    """Pids of the processes under launcher_pid whose MPI rank (Open MPI's or
    PMI's variable) is `rank`. Only its descendants: other tests run the
    same binary on 2 ranks side by side (ctest -j2), and a signal meant for
    this run must never reach theirs."""
    out = []
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            with open("/proc/%s/environ" % d, "rb") as f:
                env = dict(kv.split(b"=", 1) for kv in f.read().split(b"\0") if b"=" in kv)
            with open("/proc/%s/cmdline" % d, "rb") as f:
                argv = f.read().split(b"\0")
        except OSError:
            continue
        r = env.get(b"OMPI_COMM_WORLD_RANK", env.get(b"PMI_RANK"))
        if r == str(rank).encode() and argv[0] == binary.encode() and int(d) != launcher_pid and \
                descends_from(int(d), launcher_pid):
            out.append(int(d))
    return out


def check_other_rank(chk, binary, work, model):
    """2 ranks, TERM sent to rank 1 only: the stop is agreed at a boundary
    through rank 1's flag, and rank 0 (whose log is the run's account) must
    say so and name the iteration of the checkpoint written. Before
    2026-12-03 rank 0 logged nothing about the signal in that case (seen in
    a real Slurm chain, where mpiexec's forwarding reached rank 1 first)."""
    mpx = mc.mpiexec()
    if mpx is None:
        chk.fail("2 ranks: no mpiexec (Debian package openmpi-bin)")
        return
    ck = os.path.join(work, "ck_np2")
    shutil.rmtree(ck, ignore_errors=True)
    logpath = os.path.join(work, "np2.log")
    with open(logpath, "wb") as logf:
        p = subprocess.Popen([mpx, "-n", "2", "--oversubscribe", binary, "solve", model, "--method", "jacobi",
                              "--tolerance", "1e-8", "--progress-every", "1e-9", "--checkpoint", ck,
                              "-o", os.path.join(work, "np2.h5")], stdout=subprocess.DEVNULL, stderr=logf)
        deadline = time.monotonic() + 300  # only against a hang
        sent = []
        while time.monotonic() < deadline and p.poll() is None:
            with open(logpath, "rb") as f:
                if b"solve: iter 5 " in f.read():
                    sent = rank_pids(p.pid, binary, 1)
                    for pid in sent:
                        os.kill(pid, signal.SIGTERM)
                    break
            time.sleep(0.005)
        rc = p.wait(timeout=300)
    with open(logpath, errors="replace") as f:
        log = f.read()
    if not chk.check(len(sent) == 1, "2 ranks: TERM sent to rank 1's process only", "pids %s; exit %d" % (sent, rc)):
        return
    chk.check(rc == mc.EXIT_STOPPED, "2 ranks, TERM to rank 1: exit 75", "exit %d" % rc)
    m = re.search(r"solve: a signal received by another rank acted on at the sweep boundary at [\d.]+ s "
                  r"\(iteration (\d+);", log)
    c = re.search(r"solve: stop requested; checkpoint written \(iteration (\d+),", log)
    chk.check(m is not None and c is not None and m.group(1) == c.group(1),
              "2 ranks, TERM to rank 1: rank 0 logs the other rank's signal at the iteration of the checkpoint",
              log[-800:])
    chk.check(SIGNAL_LINE.search(log) is None, "2 ranks, TERM to rank 1: rank 0 does not claim the signal as its own")


if __name__ == "__main__":
    main()
