"""Shared pieces of the command-line tests: run gridlu under mpiexec, check, tally.

A script makes one Suite, runs its cases as `with suite.case(name) as c:` blocks and ends
with suite.finish(), which prints "N passed, M failed" and sets the exit status. A case
fails when any of its checks fails or it raises; the other cases still run.
"""

import argparse
import os
import re
import signal
import subprocess
import sys
import time
import tempfile
import traceback
from contextlib import contextmanager
from pathlib import Path

import h5py
import numpy as np

# Generous for the small systems used here, even with 4 ranks on 2 cores; a run that takes
# longer is taken to be hung (a rank waiting in a collective the others never reach).
TIMEOUT_SECONDS = 120


class Run:
    """The outcome of one command."""

    def __init__(self, argv, code, stdout, stderr, hung):
        self.argv, self.code, self.stdout, self.stderr, self.hung = argv, code, stdout, stderr, hung

    def gridlu_lines(self):
        return [line for line in self.stderr.splitlines() if line.startswith("gridlu:")]

    def describe(self):
        head = " ".join(str(a) for a in self.argv)
        status = "hung (killed)" if self.hung else f"exit {self.code}"
        tail = self.stderr.strip().splitlines()[-5:]
        return f"`{head}` -> {status}" + "".join(f"\n        | {line}" for line in tail)


class CaseAbort(Exception):
    """Raised by Case.require: the remaining checks of the case depend on this one."""


class Case:
    def __init__(self, name, directory):
        self.name, self.dir, self.failures = name, directory, []

    def check(self, ok, what):
        if not ok:
            self.failures.append(what)
        return bool(ok)

    def require(self, ok, what):
        if not self.check(ok, what):
            raise CaseAbort

    def succeeded(self, run):
        """The command finished, exited 0 and printed no gridlu diagnostics."""
        self.require(not run.hung, f"hung: {run.describe()}")
        self.require(run.code == 0, f"expected exit 0: {run.describe()}")
        self.check(not run.gridlu_lines(), f"unexpected diagnostics: {run.gridlu_lines()}")

    def failed_with(self, run, code, mention=None):
        """The command finished with `code` and exactly one `gridlu: error: ` line on stderr,
        containing `mention` (a regular expression) when given; returns that line."""
        self.require(not run.hung, f"hung: {run.describe()}")
        self.check(run.code == code, f"expected exit {code}: {run.describe()}")
        lines = run.gridlu_lines()
        self.require(len(lines) == 1, f"expected one 'gridlu:' line on stderr, got {lines!r}")
        self.check(lines[0].startswith("gridlu: error: "),
                   f"the line should start with 'gridlu: error: ': {lines[0]!r}")
        if mention is not None:
            self.check(re.search(mention, lines[0]), f"{lines[0]!r} should match {mention!r}")
        return lines[0]


class Suite:
    def __init__(self, description):
        parser = argparse.ArgumentParser(description=description)
        parser.add_argument("--gridlu", required=True, help="the gridlu executable")
        parser.add_argument("--mpiexec", required=True, help="the MPI launcher")
        args = parser.parse_args()
        self.gridlu, self.mpiexec = args.gridlu, args.mpiexec
        self._tmp = tempfile.TemporaryDirectory(prefix="gridlu-cli-")
        self.root = Path(self._tmp.name)
        self.passed, self.failed = 0, 0

    def run(self, *args, ranks=1, timeout=TIMEOUT_SECONDS, env=None):
        """gridlu ARGS on `ranks` ranks, with `env` added to the environment. -q keeps
        mpiexec's own banners off stderr, so what is there comes from gridlu."""
        argv = [self.mpiexec, "-q", "-n", str(ranks), "--oversubscribe", self.gridlu,
                *map(str, args)]
        return self.launch(argv, timeout=timeout, env=env)

    def launch(self, argv, cwd=None, timeout=TIMEOUT_SECONDS, env=None):
        """Any launch line (an MPMD one too); Run.seconds is how long it took."""
        started = time.monotonic()
        # A session of its own, so that a hung run can be killed with all its ranks.
        proc = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                                start_new_session=True, cwd=cwd or self.root,
                                env={**os.environ, **(env or {})})
        try:
            out, err = proc.communicate(timeout=timeout)
            run = Run(argv, proc.returncode, out, err, hung=False)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            out, err = proc.communicate()
            run = Run(argv, proc.returncode, out, err, hung=True)
        run.seconds = time.monotonic() - started
        return run

    def sanitized(self):
        """True when gridlu is built with AddressSanitizer, which reserves terabytes of
        address space: no ulimit -v can hold it."""
        libs = subprocess.run(["ldd", self.gridlu], capture_output=True, text=True).stdout
        return "asan" in libs

    @contextmanager
    def case(self, name):
        directory = self.root / re.sub(r"[^A-Za-z0-9_.-]+", "_", name)
        directory.mkdir()
        c = Case(name, directory)
        try:
            yield c
        except CaseAbort:
            pass
        except Exception:  # a broken case must not stop the others
            c.failures.append("raised:\n" + traceback.format_exc())
        if c.failures:
            self.failed += 1
            print(f"FAIL {name}")
            for f in c.failures:
                print("     - " + f.replace("\n", "\n       "))
        else:
            self.passed += 1
            print(f"ok   {name}")
        sys.stdout.flush()

    def finish(self):
        self._tmp.cleanup()
        print(f"{self.passed} passed, {self.failed} failed")
        sys.exit(1 if self.failed or not self.passed else 0)


def eps(dtype):
    """Unit roundoff of a (real or complex) numpy type."""
    return float(np.finfo(np.dtype(dtype)).eps)


def wide(dtype):
    """The double-precision type of the same kind (real or complex)."""
    return np.complex128 if np.issubdtype(np.dtype(dtype), np.complexfloating) else np.float64


def random_matrix(rng, shape, dtype):
    """Entries uniform in [-1, 1), real and imaginary parts alike."""
    x = rng.uniform(-1, 1, shape)
    if np.issubdtype(np.dtype(dtype), np.complexfloating):
        x = x + 1j * rng.uniform(-1, 1, shape)
    return x.astype(dtype)


def conditioned_matrix(rng, n, dtype, cond=10.0):
    """A random dense matrix with singular values spread over [1, cond]: its rows are not
    ordered by size, so partial pivoting has work to do, and its condition number is known,
    so the accuracy expected of a solve can be stated (see rel_tol)."""
    u, _ = np.linalg.qr(random_matrix(rng, (n, n), wide(dtype)))
    v, _ = np.linalg.qr(random_matrix(rng, (n, n), wide(dtype)))
    return ((u * np.geomspace(1.0, cond, n)) @ v.conj().T).astype(dtype)


def rel_tol(a):
    """Bound for ||X - X_ref||_F / ||X_ref||_F when X comes from a solve in a's precision.

    Forward error <= cond(A) x backward error, and LU with partial pivoting has a backward
    error within a small multiple of n eps in practice (common practice); 100 n eps cond(A)
    leaves room for that. Capped at 1e-3: beyond that an answer is wrong whatever the bound
    says, and the systems used here are conditioned well enough to stay far below the cap.
    """
    n = a.shape[0]
    cond = np.linalg.cond(a.astype(wide(a.dtype)))
    return min(100 * n * eps(a.dtype) * cond, 1e-3)


def rel_diff(x, ref):
    return float(np.linalg.norm(np.asarray(x) - ref) / np.linalg.norm(ref))


def backward_error(a, x, b):
    """Worst over the right-hand sides of ||b - A x||_inf / (||A||_inf ||x||_inf + ||b||_inf),
    evaluated in double precision (the normwise backward error, common practice)."""
    w = wide(a.dtype)
    a, x, b = a.astype(w), np.asarray(x).astype(w), np.asarray(b).astype(w)
    x2, b2 = x.reshape(len(x), -1), b.reshape(len(b), -1)
    r = b2 - a @ x2
    an = np.linalg.norm(a, np.inf)
    return max(np.abs(r[:, k]).max() / (an * np.abs(x2[:, k]).max() + np.abs(b2[:, k]).max())
               for k in range(b2.shape[1]))


def reference_solution(a, b):
    """reference: numpy.linalg.solve, in double precision on the values as stored, so that the
    difference measures gridlu's error only."""
    w = wide(a.dtype)
    return np.linalg.solve(a.astype(w), np.asarray(b).astype(w))


def write_h5(path, datasets):
    """Write {name: array} with h5py, the independent client: row-major, complex values as
    h5py's compound of `r` and `i`."""
    with h5py.File(path, "w") as f:
        for name, data in datasets.items():
            f[name] = data


def read_h5(path, name):
    with h5py.File(path, "r") as f:
        return f[name][()]
