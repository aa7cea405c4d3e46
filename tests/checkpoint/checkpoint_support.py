"""Pieces shared by the checkpoint tests: a system with a known condition number, gridlu jobs in
the background that can be signalled or killed at chosen moments, a watch on a checkpoint
directory, and checks of checkpoints and solutions against h5py and numpy.

The command-line harness (tests/cli/harness.py) provides the suite, the cases and the
synchronous runs; this module adds what only checkpointing needs.
"""

import json
import os
import re
import shlex
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import h5py
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "cli"))
import harness  # noqa: E402
from harness import Run, conditioned_matrix, eps, random_matrix, read_h5, rel_diff  # noqa: E402

# Large enough that a run on 2 ranks lasts a second or two and a checkpoint write (72 MB)
# can be caught in progress, small enough to keep the suite within a few minutes.
N = 3000
# The order of System under the sanitizers, whose build runs gridlu's own loops (checksums,
# packing, pivoting) many times slower: a checkpointed run of this order, and each of its
# writes, still lasts longer than one of N in the release build, with the same code paths.
# (2 ranks on 2 shared cores, EVERY: sanitized, 2000: 13 s, 8 writes of 0.6 s; 3000: 156 s,
# 27 writes of 3 s. Release, 3000: 4.6 s, 10 writes of 0.15 s.)
SANITIZED_N = 2000
BLOCK = 32
COND = 10.0
# Minutes of factorization between periodic checkpoints (0.03 s): several per run, also
# where the factorization takes only a quarter of a second.
EVERY = "0.0005"
RANKS = 2
STOPPED, NO_DATA = 5, 3
# Every output is written inside a private staging directory beside its target.
STAGING_PREFIX = ".gridlu-stage-"
# Polling period of the directory watch and of job waits.
POLL = 0.001
# A resume on the same grid keeps the finished columns and does the rest with the same kind
# of operations, if perhaps with another block size (resume's default): its X differs from the
# uninterrupted run's by rounding alone, about 1e-13 for these systems, far below this.
SAME_GRID_TOL = 1e-12


def solution_tol(n):
    """harness.rel_tol for a matrix of order n whose condition number is COND by construction:
    computing it with np.linalg.cond would cost more than the test itself."""
    return min(100 * n * eps(np.float64) * COND, 1e-3)


def text(value):
    """An HDF5 string attribute as str, whether h5py gives it as str or bytes."""
    if isinstance(value, np.ndarray) and value.size == 1:
        value = value.item()
    return value.decode() if isinstance(value, (bytes, np.bytes_)) else str(value)


class System:
    """A float64 system A X = B of order n (N, or SANITIZED_N) in an input file, with numpy's
    solution and, once `solve_uninterrupted` has run, an uninterrupted gridlu run's X and
    pivots."""

    def __init__(self, suite, seed, name="system.h5"):
        rng = np.random.default_rng(seed)
        self.suite = suite
        self.path = suite.root / name
        self.n = SANITIZED_N if suite.sanitized() else N
        self.tol = solution_tol(self.n)
        self.a = conditioned_matrix(rng, self.n, np.float64, COND)
        self.b = random_matrix(rng, (self.n, 2), np.float64)
        harness.write_h5(self.path, {"A": self.a, "B": self.b})
        # reference: numpy.linalg.solve
        self.x_numpy = np.linalg.solve(self.a, self.b)
        self.x_ref = self.pivots_ref = None
        self.seconds = None

    def solve_args(self, out, *options):
        """A solve that also saves its factors beside X (unless the options name a file): a
        finished job keeps no working state, and the factors hold its pivots."""
        keep = [] if "--save-factors" in options else ["--save-factors", factors_of(out)]
        return ["solve", self.path, "--out", out, "--block", BLOCK, *keep, *options]

    def solve_uninterrupted(self, c):
        """Solve without checkpoints on RANKS ranks, keeping the factors for their pivots."""
        out, factors = c.dir / "x.h5", c.dir / "factors.h5"
        job = Job(self.suite, self.solve_args(out, "--save-factors", factors), RANKS)
        run = job.wait()
        c.succeeded(run)
        self.seconds = job.seconds
        x = read_h5(out, "X")
        err = rel_diff(x, self.x_numpy)
        # reference: numpy.linalg.solve
        c.require(err <= self.tol,
                  f"||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > {self.tol:.2e}")
        self.x_ref, self.pivots_ref = x, read_h5(factors, "pivots")

    def check_solved(self, c, directory, out, same_grid=True):
        """After a resume that exited 0: X in `out` is the solution, the directory records the
        job as finished and holds no working state, and the factors the job saved hold the
        pivots of the uninterrupted run; returns the finished job's figures ("k", "elapsed",
        "restarts") from its completion record."""
        c.require(out.exists(), f"no X at {out}")
        x = read_h5(out, "X")
        err = rel_diff(x, self.x_numpy)
        # reference: numpy.linalg.solve
        c.check(err <= self.tol,
                f"||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > {self.tol:.2e}")
        # reference: the uninterrupted run; on another grid or block size the rounding differs,
        # and both answers are only within the accuracy of a solve of each other.
        tol = SAME_GRID_TOL if same_grid else 2 * self.tol
        err = rel_diff(x, self.x_ref)
        c.check(err <= tol, f"||X - X_uninterrupted||_F / ||X_uninterrupted||_F = {err:.2e} > "
                            f"{tol:.0e}")
        c.check(not partials(directory), f"staging left: {partials(directory)}")
        c.check(not (directory / "checkpoint.h5").exists(),
                "the working state is still there after X was written")
        job = json.loads((directory / "job.json").read_text())
        done = json.loads((directory / "complete.json").read_text())
        c.require(isinstance(done, dict) and done.get("job_id") == job.get("job_id"),
                  f"complete.json {done} does not belong to the job {job.get('job_id')}")
        c.check(done.get("output") == str(out.resolve()),
                f"complete.json names {done.get('output')}, X is {out}")
        # reference: the pivots of the uninterrupted run (partial pivoting chooses by value,
        # and the gaps between candidates in a random matrix dwarf rounding differences)
        pivots = read_h5(Path(job["save_factors"]), "pivots")
        diff = np.flatnonzero(pivots != self.pivots_ref)
        c.check(diff.size == 0, f"pivots differ from the uninterrupted run's at {diff.size} steps,"
                                f" the first at step {diff[:1]}")
        return {"k": int(done.get("columns_done", -1)), "restarts": int(done.get("restarts", -1)),
                "elapsed": float(done.get("elapsed_seconds", -1.0))}


def factors_of(out):
    return Path(out).with_suffix(".lu.h5")


class Job:
    """gridlu under mpiexec in the background, in a session of its own so that its ranks can
    be found, signalled and killed by id."""

    def __init__(self, suite, args, ranks, cwd=None, launcher=None):
        """`launcher`, when given, is the command that runs mpiexec (tools/launch)."""
        self.ranks = ranks
        self.argv = [launcher or suite.mpiexec, "-q", "-n", str(ranks), "--oversubscribe",
                     suite.gridlu, *map(str, args)]
        self._exe = os.path.realpath(suite.gridlu)
        # Sessions of the job: its own, and those its processes start (tools/launch puts
        # mpiexec in one), remembered so that ranks outliving mpiexec are still found.
        self._sessions = set()
        # Files, not pipes: nobody reads while the job runs.
        self._out, self._err = tempfile.TemporaryFile("w+"), tempfile.TemporaryFile("w+")
        self.started = time.monotonic()
        self.seconds = None
        self.proc = subprocess.Popen(self.argv, stdout=self._out, stderr=self._err, text=True,
                                     start_new_session=True, cwd=cwd or suite.root)

    def elapsed(self):
        return time.monotonic() - self.started

    def running(self):
        return self.proc.poll() is None

    def _session(self):
        """(pid, process group, executable) of the live processes in the job's sessions."""
        live = {}
        for entry in os.scandir("/proc"):
            if not entry.name.isdigit():
                continue
            try:
                stat = Path(entry.path, "stat").read_text()
                # After the command name: state, ppid, process group, session, ...
                fields = stat[stat.rindex(")") + 2:].split()
                exe = os.readlink(os.path.join(entry.path, "exe"))  # fails for zombies
            except (OSError, ValueError):
                continue
            live[int(entry.name)] = (int(fields[1]), int(fields[2]), int(fields[3]), exe)
        self._sessions.add(self.proc.pid)
        self._sessions |= {pid for pid, (ppid, _, sid, _) in live.items()
                           if sid == pid and live.get(ppid, (0, 0, 0, ""))[2] in self._sessions}
        return [(pid, pgid, exe) for pid, (_, pgid, sid, exe) in live.items()
                if sid in self._sessions]

    def rank_pids(self, timeout=30):
        """The pids of the gridlu ranks, waiting until all have started."""
        deadline = time.monotonic() + timeout
        while True:
            pids = [pid for pid, _, exe in self._session() if exe == self._exe]
            if len(pids) >= self.ranks or not self.running() or time.monotonic() > deadline:
                return pids
            time.sleep(POLL)

    def announced(self, pattern):
        """Seconds from launch until `pattern` shows in the job's stdout or stderr, None if the
        job ends without it. Read through handles of their own: the job writes at the offset
        it shares with self._out and self._err."""
        while True:
            running = self.running()
            for stream in (self._out, self._err):
                with open(f"/proc/self/fd/{stream.fileno()}") as f:
                    if re.search(pattern, f.read()):
                        return self.elapsed()
            if not running:
                return None
            time.sleep(POLL)

    def signal_ranks(self, sig):
        """`sig` to every rank, as a batch system signals all processes of a job. (mpiexec
        would turn SIGTERM and SIGINT into a kill of the job, and exit 1 itself.)"""
        for pid in self.rank_pids():
            try:
                os.kill(pid, sig)
            except ProcessLookupError:
                pass

    def kill(self):
        """SIGKILL to every process group of the session, as on a node failure. Open MPI
        gives each rank a process group of its own, apart from mpiexec's."""
        while True:
            groups = {pgid for _, pgid, _ in self._session()}
            if not groups:
                break
            for pgid in groups:
                try:
                    os.killpg(pgid, signal.SIGKILL)
                except ProcessLookupError:
                    pass
            time.sleep(POLL)

    def wait(self, timeout=harness.TIMEOUT_SECONDS):
        """The Run once the job has ended (again on later calls); one still running `timeout`
        seconds after its start is killed and counts as hung."""
        hung = False
        try:
            self.proc.wait(timeout=max(0.0, self.started + timeout - time.monotonic()))
        except subprocess.TimeoutExpired:
            hung = True
        self.kill()  # also any rank outliving mpiexec
        self.proc.wait()
        if self.seconds is None:
            self.seconds = self.elapsed()
        self._out.seek(0)
        self._err.seek(0)
        return Run(self.argv, self.proc.returncode, self._out.read(), self._err.read(), hung)


def partials(directory):
    """Staging directories of checkpoint writes under way (or left by a kill) in `directory`:
    those that hold a checkpoint.h5 being written."""
    try:
        return [e.name for e in os.scandir(directory) if e.name.startswith(STAGING_PREFIX)
                and os.path.exists(os.path.join(e.path, "checkpoint.h5"))]
    except FileNotFoundError:
        return []


def staging_left(root):
    """Staging directories, or temporary files of the scheme before them, anywhere under
    `root`: every output is made in a staging directory beside its target and renamed out of
    it, so none may remain after a run that ended by itself."""
    return sorted(str(p) for p in Path(root).rglob("*")
                  if p.name.startswith(STAGING_PREFIX) or ".partial-" in p.name)


def alive(pid):
    """The process runs (a zombie has ended)."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat[stat.rindex(")") + 2:].split()[0] != "Z"


def committed(directory):
    """The identity of the current checkpoint.h5, or None: every commit renames a new file
    over it, so inode and modification time change."""
    try:
        st = os.stat(directory / "checkpoint.h5")
    except FileNotFoundError:
        return None
    return st.st_ino, st.st_mtime_ns


class Watch:
    """Follows a checkpoint directory by polling: when checkpoint writes began (a temporary
    file appeared) and ended, and when checkpoint.h5 was replaced. Times are
    time.monotonic(); only changes after the watch was made (at `origin`) count."""

    def __init__(self, directory):
        self.dir = directory
        self.origin = time.monotonic()
        self.starts, self.ends, self.commits = [], [], []
        self._writing = bool(partials(directory))
        self._current = committed(directory)

    def poll(self):
        now = time.monotonic()
        writing = bool(partials(self.dir))
        if writing and not self._writing:
            self.starts.append(now)
        if self._writing and not writing and self.starts:
            self.ends.append(now)
        self._writing = writing
        current = committed(self.dir)
        if current is not None and current != self._current:
            self.commits.append(now)
        self._current = current
        return now

    def writing(self):
        return self._writing

    def until(self, job, moment, timeout=60):
        """Poll until moment(watch, now) holds (True) or the job ends or time runs out (False)."""
        deadline = time.monotonic() + timeout
        while job.running() and time.monotonic() < deadline:
            if moment(self, self.poll()):
                return True
            time.sleep(POLL)
        return False

    def follow(self, job):
        """Poll until the job ends."""
        while job.running():
            self.poll()
            time.sleep(POLL)
        self.poll()


def after_commits(count):
    return lambda w, now: len(w.commits) >= count


def interrupt(suite, c, args, ranks, directory):
    """Start gridlu ARGS, send SIGTERM to its ranks once it has committed a checkpoint, and
    require that it stopped with a checkpoint (exit 5); returns its wall time."""
    job = Job(suite, args, ranks)
    reached = Watch(directory).until(job, after_commits(1))
    job.signal_ranks(signal.SIGTERM)
    run = job.wait()
    c.require(reached, f"the run ended before a checkpoint: {run.describe()}")
    c.require(not run.hung and run.code == STOPPED, f"expected exit 5: {run.describe()}")
    return job.seconds


def check_elapsed(c, cp, wall):
    """The checkpoint's time so far is within the wall time of the runs that made it."""
    # reference: the test's own clock around those runs
    c.check(cp["elapsed"] <= wall, f"elapsed_seconds = {cp['elapsed']:.3f} but the runs took "
                                   f"{wall:.3f} s in all")


def inspect_checkpoint(path, a):
    """(problems, {"k", "pivots", "restarts", "elapsed"}) of the checkpoint at `path` for the
    system matrix `a`: h5py must open it, its attributes must agree with each other and with
    its datasets, and its datasets must hold a partial LU factorization of `a`."""
    try:
        with h5py.File(path, "r") as f:
            attrs = {name: f.attrs[name] for name in f.attrs}
            work = f["work"][()] if "work" in f else None
            pivots = f["pivots"][()] if "pivots" in f else None
    except (OSError, KeyError, ValueError) as e:
        return [f"h5py cannot read {path}: {e}"], None
    problems = []
    missing = {"gridlu_kind", "columns_done", "n", "type", "restarts", "elapsed_seconds",
               "work_checksum", "pivots_checksum"} - attrs.keys()
    if missing or work is None or pivots is None:
        return [f"missing attributes {sorted(missing)} or datasets (work: {work is not None},"
                f" pivots: {pivots is not None})"], None
    n, k = int(attrs["n"]), int(attrs["columns_done"])
    info = {"k": k, "pivots": pivots, "restarts": int(attrs["restarts"]),
            "elapsed": float(attrs["elapsed_seconds"])}
    for ok, what in [(text(attrs["gridlu_kind"]) == "checkpoint",
                      f"gridlu_kind = {attrs['gridlu_kind']!r}"),
                     (text(attrs["type"]) == a.dtype.name, f"type = {attrs['type']!r}"),
                     (n == a.shape[0], f"n = {n}, A is {a.shape[0]} x {a.shape[0]}"),
                     (work.shape == a.shape and work.dtype == a.dtype,
                      f"work is {work.shape} {work.dtype}"),
                     (0 <= k <= n, f"columns_done = {k}"),
                     (pivots.shape == (k,) and pivots.dtype == np.int64,
                      f"pivots is {pivots.shape} {pivots.dtype} for columns_done = {k}"),
                     (info["restarts"] >= 0, f"restarts = {info['restarts']}"),
                     (info["elapsed"] >= 0, f"elapsed_seconds = {info['elapsed']}")]:
        if not ok:
            problems.append(what)
    if problems:
        return problems, info
    # Step i swaps row i with a row at or below it.
    bad = np.flatnonzero((pivots < np.arange(k)) | (pivots >= n))
    if bad.size:
        return [f"pivots[{bad[0]}] = {pivots[bad[0]]} outside [{bad[0]}, {n})"], info
    problems += partial_lu_problems(a, work, pivots)
    return problems, info


def columns_done(directory):
    """columns_done of the current checkpoint, 0 if it cannot be read."""
    try:
        with h5py.File(directory / "checkpoint.h5", "r") as f:
            return int(f.attrs["columns_done"])
    except (OSError, KeyError, ValueError):
        return 0


def sound_checkpoint(c, directory, a):
    """Require that `directory` holds a checkpoint passing inspect_checkpoint; its summary."""
    problems, info = inspect_checkpoint(directory / "checkpoint.h5", a)
    c.require(not problems, f"{directory / 'checkpoint.h5'}: " + "; ".join(problems))
    return info


def partial_lu_problems(a, work, pivots):
    """Hold `work` after k = len(pivots) eliminated columns to the definition of a partial LU
    factorization with row interchanges (LAPACK's getrf layout), evaluated with numpy:
    P A = [L11 0; L21 I] [U11 U12; 0 S] with L unit lower triangular in work's first k
    columns, U in its first k rows and the trailing matrix S below and right of them.
    Checked on a sample of rows, within the backward error bound of LU, |P A - L U| <=
    gamma |L| |U| (Higham), with room; partial pivoting also bounds |L| by 1."""
    n, k = a.shape[0], len(pivots)
    perm = np.arange(n)
    for i, p in enumerate(pivots):
        perm[[i, p]] = perm[[p, i]]
    u = np.triu(work[:k])
    rows = sorted(set(np.linspace(0, n - 1, 16).astype(int)) | {max(k - 1, 0), min(k, n - 1)})
    problems = []
    for r in rows:
        ell = np.append(work[r, :r], 1.0) if r < k else work[r, :k]
        top = u[:r + 1] if r < k else u
        product, scale = ell @ top, np.abs(ell) @ np.abs(top)
        if r >= k:
            product[k:] += work[r, k:]
            scale[k:] += np.abs(work[r, k:])
        residual = np.abs(a[perm[r]] - product).max()
        bound = 10 * n * eps(a.dtype) * scale.max()
        if not residual <= bound:
            problems.append(f"row {r} of P A - L U is {residual:.2e} > {bound:.2e}")
        multipliers = np.abs(work[r, :min(r, k)])
        if multipliers.size and not multipliers.max() <= 1:
            problems.append(f"row {r} of L has an entry {multipliers.max():.3g} > 1")
    return problems


def printed_resume(run):
    """The arguments after `gridlu resume` in the command gridlu printed, or None."""
    for line in (run.stdout + "\n" + run.stderr).splitlines():
        m = re.search(r"gridlu resume (.*)$", line)
        if m:
            return shlex.split(m.group(1))
    return None
