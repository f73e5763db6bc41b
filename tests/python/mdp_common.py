"""mdp_common.py - shared helpers for the Python cross-check tests of sluice.

Everything here is computed independently of sluice: random sparse MDPs are
generated in numpy, written as triplet CSV for `sluice import`, and the model
and solution files sluice writes are read back with h5py and rebuilt as
scipy sparse matrices, so that the checks never trust sluice's own numbers.

Conventions used throughout:
  * a "pair" is one (state, action) row; pairs of state s are
    first_pair[s] .. first_pair[s+1]-1, exactly as in the model file contract;
  * P is the (n_pairs x n_states) CSR matrix of transition probabilities and
    r the vector of expected immediate rewards r(s,a) = sum_j p(j|s,a) rew;
  * the Bellman operator is (T v)(s) = max over pairs k of s of r_k + g P_k v.

Error bounds used as references (Puterman 1994, "Markov Decision Processes",
Wiley, Section 6.3, Theorem 6.3.1 / Proposition 6.2.1 (contraction)):
for any v,  sup|v - v*| <= sup|T v - v| / (1 - g), and for a fixed policy
pi,  sup|v - v_pi| <= sup|T_pi v - v| / (1 - g).  These turn a computed
vector into a *certified* reference, up to the floating-point error of
evaluating T itself, which `roundoff_allowance` covers.

Run under /usr/bin/python3 (numpy, scipy, h5py from Debian).
"""

import fcntl
import json
import os
import re
import shlex
import shutil
import struct
import subprocess
import sys
import termios
import time

import h5py
import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

EPS_MACH = np.finfo(np.float64).eps

# Exit codes from the sluice command-line contract (sysexits.h values).
EXIT_OK = 0
EXIT_USAGE = 64
EXIT_DATAERR = 65
EXIT_NOINPUT = 66
EXIT_STOPPED = 75

METHODS = ("gs", "jacobi", "mpi", "pi")


# ----------------------------------------------------------------------------
# Test bookkeeping
# ----------------------------------------------------------------------------

class Checker:
    """Collects named checks; prints each failure clearly and a closing line."""

    def __init__(self, name):
        self.name = name
        self.passed = 0
        self.failed = 0
        self.t0 = time.time()

    def check(self, ok, what, detail=""):
        """Record one check. `what` says what was checked, `detail` the numbers."""
        if ok:
            self.passed += 1
        else:
            self.failed += 1
            msg = "FAIL: %s" % what
            if detail:
                msg += " (%s)" % detail
            print(msg, flush=True)
        return ok

    def fail(self, what, detail=""):
        return self.check(False, what, detail)

    def note(self, text):
        print("  " + text, flush=True)

    def finish(self):
        """Print the summary line and exit 0 (all passed) or 1."""
        dt = time.time() - self.t0
        if self.passed + self.failed == 0:
            print("FAIL: %s ran no check" % self.name)
            self.failed = 1
        print("%s: %d passed, %d failed  (%.1f s)"
              % (self.name, self.passed, self.failed, dt), flush=True)
        sys.exit(0 if self.failed == 0 else 1)


def parse_args(argv, usage):
    """Return (sluice_binary, workdir) from `script.py SLUICE WORKDIR`.

    SLUICE may also come from the environment variable $SLUICE when the first
    argument is omitted; WORKDIR is created if missing."""
    args = argv[1:]
    if len(args) == 1 and os.environ.get("SLUICE"):
        args = [os.environ["SLUICE"], args[0]]
    if len(args) != 2:
        sys.stderr.write("usage: %s\n" % usage)
        sys.exit(2)
    binary, workdir = args
    if not (os.path.isfile(binary) and os.access(binary, os.X_OK)):
        sys.stderr.write("FAIL: sluice binary not found or not executable: %s\n"
                         % binary)
        sys.exit(1)
    os.makedirs(workdir, exist_ok=True)
    return os.path.abspath(binary), os.path.abspath(workdir)


# ----------------------------------------------------------------------------
# MDP representation
# ----------------------------------------------------------------------------

class Mdp:
    """A finite discounted MDP in the pair-row layout of the model file.

    trans_reward (reward of each transition) is known only for generated
    models; models read back from a file carry only the pair rewards r."""

    def __init__(self, n, gamma, first_pair, action, first_trans, target,
                 prob, r=None, trans_reward=None):
        self.n = int(n)
        self.gamma = float(gamma)
        self.first_pair = np.asarray(first_pair, dtype=np.int64)
        self.action = np.asarray(action, dtype=np.int64)
        self.first_trans = np.asarray(first_trans, dtype=np.int64)
        self.target = np.asarray(target, dtype=np.int64)
        self.prob = np.asarray(prob, dtype=np.float64)
        self.trans_reward = (None if trans_reward is None
                             else np.asarray(trans_reward, dtype=np.float64))
        self.n_pairs = len(self.action)
        self.n_trans = len(self.target)
        if r is None:
            if self.trans_reward is None:
                raise ValueError("need pair rewards or transition rewards")
            r = self.P_weighted(self.trans_reward)
        self.r = np.asarray(r, dtype=np.float64)
        counts = np.diff(self.first_pair)
        if np.any(counts < 1):
            raise ValueError("every state needs at least one action")
        self.state_of_pair = np.repeat(np.arange(self.n), counts)
        self._P = None

    def P_weighted(self, w):
        """sum over the transitions of each pair of prob * w (per-transition w)."""
        pt = np.repeat(np.arange(self.n_pairs), np.diff(self.first_trans))
        return np.bincount(pt, weights=self.prob * w, minlength=self.n_pairs)

    @property
    def P(self):
        """CSR matrix (n_pairs x n_states) of transition probabilities.
        Duplicate (pair, target) entries, if any, are summed."""
        if self._P is None:
            P = sp.csr_matrix((self.prob, self.target, self.first_trans),
                              shape=(self.n_pairs, self.n))
            P.sum_duplicates()
            self._P = P
        return self._P

    def max_successors(self):
        return int(np.max(np.diff(self.first_trans)))

    # -- Bellman operators ---------------------------------------------------

    def q_values(self, v):
        return self.r + self.gamma * (self.P @ v)

    def bellman(self, v):
        """Return (T v, greedy pair index per state, q-values)."""
        q = self.q_values(v)
        tv = np.maximum.reduceat(q, self.first_pair[:-1])
        # greedy pair: first pair of the state attaining the maximum
        is_max = q == tv[self.state_of_pair]
        idx = np.where(is_max, np.arange(self.n_pairs), self.n_pairs)
        greedy = np.minimum.reduceat(idx, self.first_pair[:-1])
        return tv, greedy, q

    def policy_system(self, pairs):
        """(P_pi as CSR n x n, r_pi) for a policy given as pair index per state."""
        pairs = np.asarray(pairs, dtype=np.int64)
        return self.P[pairs], self.r[pairs]

    def evaluate(self, pairs):
        """Exact value of a policy: solve (I - g P_pi) v = r_pi with scipy's
        sparse direct solver, then return (v, certified bound on |v - v_pi|)."""
        Ppi, rpi = self.policy_system(pairs)
        A = (sp.identity(self.n, format="csc") - self.gamma * Ppi).tocsc()
        v = sla.spsolve(A, rpi)
        v = np.asarray(v, dtype=np.float64).reshape(self.n)
        res = rpi + self.gamma * (Ppi @ v) - v
        bound = (np.max(np.abs(res)) / (1.0 - self.gamma)
                 + roundoff_allowance(self, v))
        return v, bound

    def evaluate_precise(self, pairs, refinements=5):
        """Value of a policy in extended precision (numpy.longdouble, 64-bit
        significand on x86-64): scipy's sparse LU in double, then iterative
        refinement with residuals in long double (Higham 2002, "Accuracy and
        Stability of Numerical Algorithms", 2nd ed., Chapter 12). Returns
        (v as longdouble, certified bound on |v - v_pi|): the long double
        residual / (1-g) plus its own rounding, (m+3) eps_ld per backup
        (Higham 2002, Section 3.1; every step counted twice). Small enough to
        check bounds of double-precision solutions that are accurate to a few
        ulps."""
        ld = np.longdouble
        Ppi, rpi = self.policy_system(pairs)
        A = (sp.identity(self.n, format="csc") - self.gamma * Ppi).tocsc()
        lu = sla.splu(A)
        v = lu.solve(rpi).astype(ld)
        P, r, g = Ppi.astype(ld), rpi.astype(ld), ld(self.gamma)
        for _ in range(refinements):
            res = r + g * (P @ v) - v
            v = v + lu.solve(res.astype(np.float64)).astype(ld)
        res = r + g * (P @ v) - v
        scale = np.abs(r) + g * (abs(P) @ np.abs(v)) + np.abs(v)
        m = self.max_successors()
        err = np.abs(res) + (m + 3) * np.finfo(ld).eps * scale
        return v, float(np.max(err) / (1 - g) * (1 + 1e-15))

    def certified_error(self, v):
        """Certified bound on sup|v - v*| from the Bellman residual of v."""
        tv, _, _ = self.bellman(v)
        return (np.max(np.abs(tv - v)) / (1.0 - self.gamma)
                + roundoff_allowance(self, v))

    def pairs_of_policy(self, policy_actions):
        """Map a policy given by action id per state to pair indices.
        Returns (pairs, list of states whose action id is not available)."""
        policy_actions = np.asarray(policy_actions, dtype=np.int64)
        pairs = np.full(self.n, -1, dtype=np.int64)
        match = self.action == policy_actions[self.state_of_pair]
        k = np.nonzero(match)[0]
        pairs[self.state_of_pair[k]] = k    # action ids are unique per state
        bad = np.nonzero(pairs < 0)[0]
        return pairs, bad

    def canonical(self):
        """Pair order sorted by (state, action id): a permutation of pairs."""
        return np.lexsort((self.action, self.state_of_pair))


def roundoff_allowance(mdp, v):
    """Allowance for floating-point error in applying T (or T_pi) to v.

    One backup r_k + g * sum_j p_j v_j with m terms, computed in double
    precision, is within (m + 2) u (|r_k| + g max|v|) of the exact value
    (u = unit roundoff = eps/2; summation error bound of Higham 2002,
    "Accuracy and Stability of Numerical Algorithms", 2nd ed., Section 4.2).
    Two such evaluations enter a residual (sluice's and ours), and a
    residual error is amplified by at most 1/(1-g) when turned into a value
    error; we take a factor 4 on top for safety (common practice, no source).
    """
    m = mdp.max_successors()
    scale = np.max(np.abs(mdp.r)) + mdp.gamma * np.max(np.abs(v))
    return 4.0 * (m + 2) * EPS_MACH * scale / (1.0 - mdp.gamma)


def policy_iteration(mdp, max_iter=1000):
    """Exact policy iteration (Howard 1960; Puterman 1994, Section 6.4) in
    numpy/scipy, independent of sluice. Keeps the current action unless
    another is strictly better by more than a roundoff margin, so it
    terminates. Returns (v*, optimal pairs, certified bound on |v - v*|)."""
    pairs = mdp.first_pair[:-1].copy()
    for _ in range(max_iter):
        v, _ = mdp.evaluate(pairs)
        tv, greedy, q = mdp.bellman(v)
        margin = 1e-12 * (1.0 + np.max(np.abs(v)))
        improve = tv > q[pairs] + margin
        if not np.any(improve):
            return v, pairs, mdp.certified_error(v)
        pairs = np.where(improve, greedy, pairs)
    raise RuntimeError("policy iteration did not terminate")


# ----------------------------------------------------------------------------
# Random models
# ----------------------------------------------------------------------------

def random_mdp(seed, n, gamma, actions=(1, 4), successors=(1, 4),
               local_width=None, jump_fraction=0.0, reward_scale=1.0,
               action_pool=8, dyadic_bits=20):
    """Random sparse MDP (invented test data, no source).

    n states; each state has between actions[0] and actions[1] actions whose
    ids are distinct integers drawn from 0..action_pool-1 (so ids are not
    always 0..k-1); each pair has between successors[0] and successors[1]
    distinct next states, drawn uniformly from all states, or, when
    local_width is given, from s-local_width..s+local_width (mod n) with a
    fraction jump_fraction of pairs drawn uniformly instead (keeps the
    fill-in of direct solvers small on large models).

    Probabilities are multiples of 2^-dyadic_bits that add up to exactly 1
    in floating point, so the model is stochastic without any rounding.
    Each transition gets its own reward, uniform in [-reward_scale,
    reward_scale]."""
    rng = np.random.default_rng(seed)
    n_act = rng.integers(actions[0], actions[1] + 1, size=n)
    first_pair = np.concatenate([[0], np.cumsum(n_act)])
    n_pairs = int(first_pair[-1])
    action = np.empty(n_pairs, dtype=np.int64)
    for s in range(n):
        action[first_pair[s]:first_pair[s + 1]] = np.sort(
            rng.choice(action_pool, size=n_act[s], replace=False))
    n_succ = rng.integers(successors[0], successors[1] + 1, size=n_pairs)
    n_succ = np.minimum(n_succ, n)
    first_trans = np.concatenate([[0], np.cumsum(n_succ)])
    target = np.empty(int(first_trans[-1]), dtype=np.int64)
    prob = np.empty(int(first_trans[-1]), dtype=np.float64)
    state_of_pair = np.repeat(np.arange(n), n_act)
    denom = 2 ** dyadic_bits
    for k in range(n_pairs):
        m = int(n_succ[k])
        s = int(state_of_pair[k])
        if local_width is not None and rng.random() >= jump_fraction:
            width = min(local_width, (n - 1) // 2)
            offsets = rng.choice(np.arange(-width, width + 1),
                                 size=min(m, 2 * width + 1), replace=False)
            t = np.unique((s + offsets) % n)
        else:
            t = np.sort(rng.choice(n, size=m, replace=False))
        m = len(t)
        # composition of 2^bits into m positive integer parts
        cuts = np.sort(rng.choice(denom - 1, size=m - 1, replace=False) + 1)
        parts = np.diff(np.concatenate([[0], cuts, [denom]]))
        target[first_trans[k]:first_trans[k] + m] = t
        prob[first_trans[k]:first_trans[k] + m] = parts / denom
        n_succ[k] = m
    # compact (np.unique may have removed duplicate local offsets)
    keep = np.concatenate([np.arange(first_trans[k], first_trans[k] + n_succ[k])
                           for k in range(n_pairs)])
    target = target[keep]
    prob = prob[keep]
    first_trans = np.concatenate([[0], np.cumsum(n_succ)])
    trew = rng.uniform(-reward_scale, reward_scale, size=len(target))
    return Mdp(n, gamma, first_pair, action, first_trans, target, prob,
               trans_reward=trew)


def write_csv(mdp, path, shuffle_seed=None):
    """Write the triplet CSV `state,action,next_state,probability,reward`.
    Floats are written with repr() (shortest round-trip form), so the file
    holds exactly the doubles of the model. With shuffle_seed the rows come
    in a random order (the contract allows any order)."""
    if mdp.trans_reward is None:
        raise ValueError("write_csv needs per-transition rewards")
    pt = np.repeat(np.arange(mdp.n_pairs), np.diff(mdp.first_trans))
    order = np.arange(mdp.n_trans)
    if shuffle_seed is not None:
        order = np.random.default_rng(shuffle_seed).permutation(mdp.n_trans)
    st = mdp.state_of_pair[pt]
    ac = mdp.action[pt]
    with open(path, "w") as f:
        f.write("state,action,next_state,probability,reward\n")
        lines = []
        for i in order:
            lines.append("%d,%d,%d,%r,%r\n" % (st[i], ac[i], mdp.target[i],
                                               float(mdp.prob[i]),
                                               float(mdp.trans_reward[i])))
        f.write("".join(lines))


def make_mdp(n, gamma, states):
    """Build an Mdp from a list of states; each state is a list of
    (action_id, [(next_state, probability, reward), ...]). For the small
    hand-written examples of test_published.py."""
    first_pair = [0]
    action, first_trans, target, prob, trew = [], [0], [], [], []
    for s in range(n):
        for a, trans in states[s]:
            action.append(a)
            for j, p, rw in trans:
                target.append(j)
                prob.append(p)
                trew.append(rw)
            first_trans.append(len(target))
        first_pair.append(len(action))
    return Mdp(n, gamma, first_pair, action, first_trans, target, prob,
               trans_reward=trew)


# ----------------------------------------------------------------------------
# Running sluice and reading its files
# ----------------------------------------------------------------------------

class SluiceError(Exception):
    pass


def launcher():
    """Optional launch prefix, e.g. SLUICE_LAUNCH='mpirun -np 2'."""
    return shlex.split(os.environ.get("SLUICE_LAUNCH", ""))


def mpiexec():
    """The MPI launcher: $SLUICE_MPIEXEC (CTest passes CMake's), else mpiexec
    or mpirun on PATH; None when there is none."""
    m = os.environ.get("SLUICE_MPIEXEC")
    if m:
        return m if os.path.exists(m) else None
    for name in ("mpiexec", "mpirun"):
        p = shutil.which(name)
        if p:
            return p
    return None


F_SETPIPE_SZ, F_GETPIPE_SZ = 1031, 1032  # fcntl.h (Linux)


def _blocked_writing_stderr(pid):
    """True while process pid (its main thread) sits in write(2, ...): on
    x86-64 /proc/PID/syscall starts with the number of the call it is
    blocked in (1 = write) and its first argument (the file descriptor)."""
    try:
        with open("/proc/%d/syscall" % pid) as f:
            fields = f.read().split()
    except OSError:
        return False
    return len(fields) >= 2 and fields[0] in ("1", "20") and int(fields[1], 16) == 2


def stop_when_logged(binary, nranks, args, trigger, room, sig, blocked=False):
    """Run sluice with rank 0's log going into a one-page pipe that holds
    4096 - room bytes already: on Linux a write to such a pipe appends to
    its page or waits until the reader has taken everything, so sluice can
    log `room` bytes and no more while this reader keeps one byte back.
    Once `trigger` has been logged, send sig (to sluice, or to mpiexec,
    which forwards it), then read everything. With blocked=True (1 rank
    only) the signal waits until sluice is also blocked writing its next
    log line, so it is certain to arrive before whatever follows that
    write: on Linux a signal sent by kill() is handled before the process
    returns from the write. Where the stop landed is for the caller to
    read from the log, not from any clock. Returns (exit code, rank 0's
    log, whether the trigger was seen)."""
    if blocked and nranks != 1:
        raise SluiceError("stop_when_logged: blocked=True needs 1 rank")
    r, w = os.pipe()
    log = b""
    seen = False
    try:
        fcntl.fcntl(w, F_SETPIPE_SZ, 4096)
        cap = fcntl.fcntl(w, F_GETPIPE_SZ)
        if cap != 4096:
            raise SluiceError("cannot make a one-page pipe (got %d bytes)" % cap)
        os.write(w, b"\n" * (cap - room))
        args = [str(a) for a in args]
        if nranks == 1:
            p = subprocess.Popen([binary] + args, stdout=subprocess.DEVNULL, stderr=w)
        else:
            wrap = ('if [ "${OMPI_COMM_WORLD_RANK:-$PMI_RANK}" = 0 ]; then exec "$0" "$@" 2>/proc/%d/fd/%d; fi; '
                    'exec "$0" "$@"' % (os.getpid(), w))
            p = subprocess.Popen([mpiexec(), "-n", str(nranks), "--oversubscribe", "sh", "-c", wrap, binary] + args,
                                 stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        deadline = time.monotonic() + 300  # only against a hang
        while time.monotonic() < deadline:
            avail = struct.unpack("i", fcntl.ioctl(r, termios.FIONREAD, b"\0\0\0\0"))[0]
            if avail > 1:
                log += os.read(r, avail - 1)
            if trigger in log and (not blocked or _blocked_writing_stderr(p.pid)):
                seen = True
                break
            if p.poll() is not None:
                break
            time.sleep(0.005)
        p.send_signal(sig)
    finally:
        os.close(w)
    while True:
        chunk = os.read(r, 65536)
        if not chunk:
            break
        log += chunk
    os.close(r)
    rc = p.wait(timeout=300)
    return rc, log.decode(errors="replace").lstrip("\n"), seen


def checkpoint_files(d):
    """Paths of the checkpoint files in directory d, oldest first (names
    ckpt-NNNNNN.h5); [] if d does not exist."""
    if not os.path.isdir(d):
        return []
    return [os.path.join(d, n) for n in sorted(os.listdir(d)) if re.fullmatch(r"ckpt-\d+\.h5", n)]


def run_sluice(binary, args, expect=(EXIT_OK,), timeout=300):
    """Run `sluice ARGS`; raise SluiceError unless its exit code is in expect.
    Returns the CompletedProcess (stdout/stderr as text)."""
    cmd = launcher() + [binary] + [str(a) for a in args]
    try:
        cp = subprocess.run(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        raise SluiceError("timed out after %d s: %s" % (timeout, " ".join(cmd)))
    if cp.returncode not in expect:
        raise SluiceError("exit code %d (expected %s): %s\n  stderr: %s"
                          % (cp.returncode, "/".join(map(str, expect)),
                             " ".join(cmd), cp.stderr.strip()[-2000:]))
    return cp


def import_model(binary, mdp, workdir, name, shuffle_seed=None):
    """Write the CSV, run `sluice import`, return the model file path."""
    csv = os.path.join(workdir, name + ".csv")
    h5 = os.path.join(workdir, name + ".h5")
    write_csv(mdp, csv, shuffle_seed=shuffle_seed)
    run_sluice(binary, ["import", csv, "--discount", repr(mdp.gamma),
                        "-o", h5, "--states", mdp.n])
    return h5


def _attr(f, name, default=None):
    if name not in f.attrs:
        return default
    x = f.attrs[name]
    if isinstance(x, bytes):
        return x.decode()
    if isinstance(x, np.ndarray) and x.shape == (1,):
        x = x[0]
    if isinstance(x, (np.generic,)):
        return x.item()
    return x


def read_model(path):
    """Read a sluice model file into an Mdp (independent of sluice's code)."""
    with h5py.File(path, "r") as f:
        n = int(_attr(f, "n_states"))
        mdp = Mdp(n, float(_attr(f, "discount")),
                  f["state/first_pair"][...],
                  f["pair/action"][...],
                  f["pair/first_transition"][...],
                  f["transition/target"][...].astype(np.int64),
                  f["transition/probability"][...],
                  r=f["pair/reward"][...])
        mdp.attrs = {k: _attr(f, k) for k in f.attrs}
    return mdp


def read_solution(path):
    """Read a solution (or values) file: dict of attributes plus arrays."""
    out = {}
    with h5py.File(path, "r") as f:
        for k in f.attrs:
            out[k] = _attr(f, k)
        out["value"] = f["value"][...].astype(np.float64)
        if "policy" in f:
            out["policy"] = f["policy"][...].astype(np.int64)
        if "history" in f:
            out["history"] = {k: f["history"][k][...] for k in f["history"]}
    return out


def compare_models(gen, got, rtol=4 * EPS_MACH):
    """Messages for every way the model file `got` differs from the generated
    model `gen` (pair and transition order may differ; compared canonically)."""
    msgs = []
    if got.n != gen.n:
        msgs.append("n_states %d != %d" % (got.n, gen.n))
        return msgs
    if got.n_pairs != gen.n_pairs:
        msgs.append("n_pairs %d != %d" % (got.n_pairs, gen.n_pairs))
        return msgs
    if got.gamma != gen.gamma:
        msgs.append("discount %r != %r" % (got.gamma, gen.gamma))
    a = gen.canonical()
    b = got.canonical()
    if not np.array_equal(gen.action[a], got.action[b]):
        msgs.append("action ids differ")
        return msgs
    if not np.array_equal(gen.state_of_pair[a], got.state_of_pair[b]):
        msgs.append("pairs per state differ")
        return msgs
    dP = abs(gen.P[a] - got.P[b])
    if dP.nnz and dP.max() > rtol:
        msgs.append("transition probabilities differ by %.3g" % dP.max())
    dr = np.max(np.abs(gen.r[a] - got.r[b]))
    rs = max(1.0, np.max(np.abs(gen.r)))
    if dr > 16 * EPS_MACH * rs:
        msgs.append("pair rewards differ by %.3g" % dr)
    return msgs


def check_solution_shape(chk, sol, mdp, label):
    """Checks of the solution file contract that every test wants."""
    chk.check(sol.get("sluice_format") == "solution",
              "%s: /sluice_format is 'solution'" % label,
              repr(sol.get("sluice_format")))
    chk.check(sol["value"].shape == (mdp.n,),
              "%s: /value has n_states entries" % label,
              str(sol["value"].shape))
    chk.check("policy" in sol and sol["policy"].shape == (mdp.n,),
              "%s: /policy has n_states entries" % label)
    chk.check(np.all(np.isfinite(sol["value"])),
              "%s: /value is finite" % label)
    for k in ("converged", "iterations", "value_error_bound",
              "policy_loss_bound", "discount"):
        chk.check(k in sol, "%s: attribute /%s present" % (label, k))
    if "discount" in sol:
        chk.check(float(sol["discount"]) == mdp.gamma,
                  "%s: /discount equals the model's" % label,
                  "%r vs %r" % (sol["discount"], mdp.gamma))


def json_line(obj):
    return json.dumps(obj, sort_keys=True)
