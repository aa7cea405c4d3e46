"""Checkpoint directories have an owner, end to end through mpiexec: a solve into a directory
holding another job's state is refused unless --force (which says what it discards), the same
job is pointed at `gridlu resume`, a finished job's marker is never taken for a later job's, a
directory in use by a running gridlu is refused at once, a resume after `kill -9` of mpiexec
never claims there is no checkpoint, the printed resume command works as printed (with
--force kept), crafted pivots end in one line, a kill before the first checkpoint can be
resumed, and a finished job's resume writes X again only from saved factors. Each refusal is
checked to leave the directory's files and every earlier output as they were."""

import hashlib
import json
import os
import re
import shlex
import signal
import sys
import time
from pathlib import Path

import h5py
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from checkpoint_support import (POLL, SANITIZED_N, Job, Watch, after_commits,  # noqa: E402
                                committed, harness, text)
from harness import conditioned_matrix, random_matrix, read_h5, rel_diff, write_h5  # noqa: E402

suite = harness.Suite(__doc__)
rng = np.random.default_rng(30517)
RANKS = 2
SMALL_N, SMALL_BLOCK = 300, 32
USAGE, DATA, SOLVED, STOPPED, OUTPUT = 2, 3, 0, 5, 6
STAGE_PREFIX = ".gridlu-stage-"
# A budget no step fits in: the run stops with a checkpoint at its first block step.
AT_ONCE = "0.000001"


class Small:
    """A float64 system of SMALL_N unknowns, 2 right-hand sides, in an input file of the
    suite's directory, with numpy's solution."""

    def __init__(self, path):
        self.path = path
        self.a = conditioned_matrix(rng, SMALL_N, np.float64)
        self.b = random_matrix(rng, (SMALL_N, 2), np.float64)
        write_h5(path, {"A": self.a, "B": self.b})
        # reference: numpy.linalg.solve
        self.x = np.linalg.solve(self.a, self.b)

    def solve(self, out, *options):
        return ["solve", self.path, "--out", out, "--block", SMALL_BLOCK, *options]


class Big:
    """A float64 system of n unknowns, N = 3000 of them taking a second or two to solve on 2
    ranks (72 MB checkpoints), cheap to make: A = R + 2n I with R uniform in [-1, 1), so
    ||R||_2 <= sqrt(||R||_1 ||R||_inf) < n and cond_2(A) < 3."""

    N, BLOCK = 3000, 32

    def __init__(self, path, n):
        self.path = path
        self.a = rng.uniform(-1, 1, (n, n)) + 2 * n * np.eye(n)
        self.b = rng.uniform(-1, 1, (n, 2))
        write_h5(path, {"A": self.a, "B": self.b})
        # reference: numpy.linalg.solve
        self.x_numpy = np.linalg.solve(self.a, self.b)

    def solve_args(self, out, *options):
        return ["solve", self.path, "--out", out, "--block", self.BLOCK, *options]


def tol(n):
    """Relative error allowed for X against numpy's: 100 n eps cond(A) with cond(A) <= 10 for
    every system here (10 by construction in harness.conditioned_matrix, < 3 in Big)."""
    return 100 * n * np.finfo(np.float64).eps * 10


def check_x(c, out, x_ref):
    """X in `out` is numpy's solution. reference: numpy.linalg.solve"""
    c.require(Path(out).exists(), f"no X at {out}")
    x = read_h5(out, "X")
    c.require(x.shape == x_ref.shape, f"X has shape {x.shape}, expected {x_ref.shape}")
    err = rel_diff(x, x_ref)
    c.check(err <= tol(len(x_ref)), f"||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > "
                                    f"{tol(len(x_ref)):.1e} ({out})")


def digest(path):
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def state_of(root, identity=True):
    """Every entry under `root` by relative path: a file by inode, mtime and content hash
    (by its content alone without `identity`: a file rewritten with the same bytes is then
    the same)."""
    found = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for name in dirnames + filenames:
            p = Path(dirpath) / name
            st = os.lstat(p)
            rel = str(p.relative_to(root))
            if p.is_symlink():
                found[rel] = ("link", os.readlink(p))
            elif p.is_dir():
                found[rel] = ("dir", st.st_ino)
            else:
                found[rel] = (("file", st.st_ino, st.st_mtime_ns, digest(p)) if identity else
                              ("file", digest(p)))
    return found


def same_state(c, before, root, what, identity=True):
    after = state_of(root, identity)
    changed = sorted(k for k in before.keys() | after.keys() if before.get(k) != after.get(k))
    c.check(not changed, f"{what} changed at {changed}")


def staging_left(directory):
    try:
        return [e for e in os.listdir(directory) if e.startswith(STAGE_PREFIX) or ".partial" in e]
    except FileNotFoundError:
        return []


def stopped_at_once(c, args, ckpt):
    """Run ARGS (a checkpointed solve with the budget AT_ONCE): exit 5 with a checkpoint."""
    run = suite.run(*args, "--checkpoint", ckpt, "--stop-after", AT_ONCE, ranks=RANKS)
    c.require(not run.hung and run.code == STOPPED, f"expected exit 5: {run.describe()}")
    c.require((ckpt / "checkpoint.h5").exists(), f"no checkpoint in {ckpt} after exit 5")
    return run


def finished_dir(c, ckpt):
    """A directory after its job finished: a completion marker (JSON object), no working
    state, no staging."""
    done = ckpt / "complete.json"
    if c.check(done.exists(), "no complete.json after the job finished"):
        marker = json.loads(done.read_text())
        c.check(isinstance(marker, dict) and {"job_id", "output"} <= marker.keys(),
                f"complete.json lacks job_id or output: {marker}")
        job = ckpt / "job.json"
        if isinstance(marker, dict) and job.exists():
            recorded = json.loads(job.read_text())
            c.check(marker.get("job_id") == recorded.get("job_id"),
                    f"complete.json belongs to job {marker.get('job_id')}, job.json records "
                    f"{recorded.get('job_id')}")
    c.check(not (ckpt / "checkpoint.h5").exists(),
            "checkpoint.h5 (the N^2 working state) is still there after the job finished")
    c.check(not staging_left(ckpt), f"staging left in {ckpt}: {staging_left(ckpt)}")


# ---------------------------------------------------------------------------------------------
# (2a) Another job's unfinished state

with suite.case("2a: new solve into DIR holding another job's unfinished checkpoint: exit 2 "
                "naming it; --force discards it, says so, solves") as c:
    first, second = Small(c.dir / "first_system.h5"), Small(c.dir / "second_system.h5")
    ckpt = c.dir / "ckpt"
    stopped_at_once(c, first.solve(c.dir / "first_x.h5"), ckpt)
    before = state_of(ckpt)
    run = suite.run(*second.solve(c.dir / "second_x.h5", "--checkpoint", ckpt), ranks=RANKS)
    line = c.failed_with(run, USAGE, r"first_system\.h5|first_x\.h5")
    c.check(re.search(r"\d+(\.\d+)?\s*%", line), f"the refusal gives no percentage: {line!r}")
    same_state(c, before, ckpt, "the checkpoint directory")
    c.check(not (c.dir / "second_x.h5").exists(), "the refused run wrote X")
    inputs = {p: digest(p) for p in (first.path, second.path)}
    run = suite.run(*second.solve(c.dir / "second_x.h5", "--checkpoint", ckpt, "--force"),
                    ranks=RANKS)
    c.succeeded(run)
    c.check(re.search(r"first_system\.h5|first_x\.h5", run.stdout),
            f"--force does not say on stdout what it discarded:\n{run.stdout}")
    check_x(c, c.dir / "second_x.h5", second.x)
    c.check(not (c.dir / "first_x.h5").exists(), "the discarded job's X appeared")
    c.check(all(digest(p) == h for p, h in inputs.items()), "an input changed")
    finished_dir(c, ckpt)

with suite.case("2a: same input, another --out into DIR holding the first's state: exit 2, "
                "state kept") as c:
    first = Small(c.dir / "system.h5")
    ckpt = c.dir / "ckpt"
    stopped_at_once(c, first.solve(c.dir / "x_one.h5"), ckpt)
    before = state_of(ckpt)
    run = suite.run(*first.solve(c.dir / "x_two.h5", "--checkpoint", ckpt), ranks=RANKS)
    c.failed_with(run, USAGE, r"x_one\.h5")
    same_state(c, before, ckpt, "the checkpoint directory")
    c.check(not (c.dir / "x_two.h5").exists(), "the refused run wrote X")

# ---------------------------------------------------------------------------------------------
# (2b) The same job again

with suite.case("2b: the same solve again on its unfinished DIR: exit 2 pointing at "
                "`gridlu resume`; resume then completes") as c:
    system = Small(c.dir / "system.h5")
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    stopped_at_once(c, system.solve(out), ckpt)
    before = state_of(ckpt)
    run = suite.run(*system.solve(out), "--checkpoint", ckpt, "--stop-after", AT_ONCE,
                    ranks=RANKS)
    c.failed_with(run, USAGE, r"gridlu resume")
    same_state(c, before, ckpt, "the checkpoint directory")
    c.check(not out.exists(), "the refused run wrote X")
    run = suite.run(*system.solve(out), "--checkpoint", ckpt, ranks=RANKS)
    c.failed_with(run, USAGE, r"gridlu resume")
    same_state(c, before, ckpt, "the checkpoint directory")
    c.succeeded(suite.run("resume", ckpt, ranks=RANKS))
    check_x(c, out, system.x)
    finished_dir(c, ckpt)

# ---------------------------------------------------------------------------------------------
# (2c) A finished job's marker is not the next job's

with suite.case("2c: after a first solve completed in DIR, a second one stopped there: resume "
                "completes the second, not 'nothing to do'") as c:
    first, second = Small(c.dir / "first_system.h5"), Small(c.dir / "second_system.h5")
    ckpt = c.dir / "ckpt"
    first_x, second_x = c.dir / "first_x.h5", c.dir / "second_x.h5"
    c.succeeded(suite.run(*first.solve(first_x, "--checkpoint", ckpt), ranks=RANKS))
    check_x(c, first_x, first.x)
    kept = digest(first_x)
    run = suite.run(*second.solve(second_x), "--checkpoint", ckpt, "--stop-after", AT_ONCE,
                    ranks=RANKS)
    if run.code == USAGE:
        # A finished job leaves nothing to lose; a refusal here is reported, then overridden
        # so that the rest of the case still runs.
        c.check(False, f"a solve into a DIR whose job had finished was refused: "
                       f"{run.gridlu_lines()}")
        run = suite.run(*second.solve(second_x), "--checkpoint", ckpt, "--stop-after", AT_ONCE,
                        "--force", ranks=RANKS)
    c.require(run.code == STOPPED, f"expected exit 5: {run.describe()}")
    c.check(not second_x.exists(), "the stopped run wrote X")
    run = suite.run("resume", ckpt, ranks=RANKS)
    c.succeeded(run)
    c.check("nothing to do" not in run.stdout, f"resume took the first job's marker:\n{run.stdout}")
    c.check("first_x.h5" not in run.stdout, f"resume spoke of the first job's X:\n{run.stdout}")
    check_x(c, second_x, second.x)
    c.check(digest(first_x) == kept, "the first job's X changed")
    finished_dir(c, ckpt)
    if (ckpt / "complete.json").exists():
        marker = json.loads((ckpt / "complete.json").read_text())
        c.check("second_x.h5" in json.dumps(marker), f"complete.json names {marker}")

# ---------------------------------------------------------------------------------------------
# (2d), (2e), (9): a long solve of Big.N = 3000 unknowns; of SANITIZED_N under the sanitizers,
# where a solve of that order lasts longer still (checkpoint_support.py)

big = Big(suite.root / "big_system.h5", SANITIZED_N if suite.sanitized() else Big.N)


# Minutes of factorization between checkpoints of the big solve: a few in a run, so that it
# lasts while other runs are started against its directory.
BIG_EVERY = "0.002"


def big_solve(out, ckpt, *options):
    return big.solve_args(out, "--checkpoint", ckpt, *options)


with suite.case("2d: runs started on a DIR in use: exit 6 at once; the running solve ends "
                "with exit 0 and the right X") as c:
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    other = Small(c.dir / "other_system.h5")
    job = Job(suite, big_solve(out, ckpt, "--checkpoint-every", BIG_EVERY), RANKS)
    reached = Watch(ckpt).until(job, after_commits(1))
    # The running solve is frozen while the others start: it still holds the directory, and
    # however fast the machine, it cannot end first. Refused "at once" means they end while
    # it is frozen.
    ranks = job.rank_pids()
    for pid in ranks:
        os.kill(pid, signal.SIGSTOP)
    try:
        intruders = {"solve of another job": Job(suite, other.solve(c.dir / "other_x.h5",
                                                                    "--checkpoint", ckpt),
                                                 RANKS),
                     "resume": Job(suite, ["resume", ckpt], 1)}
        deadline = time.monotonic() + 30
        while any(i.running() for i in intruders.values()) and time.monotonic() < deadline:
            time.sleep(POLL)
        at_once = {name: not i.running() for name, i in intruders.items()}
    finally:
        for pid in ranks:
            os.kill(pid, signal.SIGCONT)
    results = {name: intruder.wait() for name, intruder in intruders.items()}
    run = job.wait()
    c.require(reached, f"the first run ended before its first checkpoint: {run.describe()}")
    for name, r in results.items():
        c.check(at_once[name], f"the {name} was still running 30 s later, while the solve "
                               f"holding the directory was frozen")
        c.failed_with(r, OUTPUT, re.escape(ckpt.name))
    c.succeeded(run)
    check_x(c, out, big.x_numpy)
    c.check(not (c.dir / "other_x.h5").exists(), "the refused solve wrote X")
    finished_dir(c, ckpt)


def alive(pid):
    """The process exists and is not a zombie."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat[stat.rindex(")") + 2] != "Z"


with suite.case("2e: kill -9 of mpiexec mid-solve: the ranks stop within seconds; resume "
                "right after is refused (6) or works, never 'no checkpoint'; retried, right X") \
        as c:
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    job = Job(suite, big_solve(out, ckpt, "--checkpoint-every", BIG_EVERY), RANKS)
    reached = Watch(ckpt).until(job, after_commits(1))
    ranks = job.rank_pids()
    job.proc.kill()  # SIGKILL to mpiexec alone, as `kill -9 <mpiexec's pid>`
    job.proc.wait()
    killed = time.monotonic()
    c.require(reached and ranks, f"no checkpoint or no ranks before the kill: {ranks}")
    outcomes = []
    try:
        run = suite.run("resume", ckpt, ranks=RANKS)
        outcomes.append(run)
        # reference: the test's own clock since the kill
        while any(alive(p) for p in ranks) and time.monotonic() - killed < 60:
            time.sleep(0.05)
        orphaned = time.monotonic() - killed
        c.check(orphaned <= 15, f"the ranks of the killed mpiexec ran on for {orphaned:.1f} s")
        while outcomes[-1].code == OUTPUT and time.monotonic() - killed < 90:
            time.sleep(0.3)
            outcomes.append(suite.run("resume", ckpt, ranks=RANKS))
    finally:
        for pid in ranks:  # our own ranks, if they outlived the checks
            if alive(pid):
                os.kill(pid, signal.SIGKILL)
    for r in outcomes:
        c.check(not r.hung and r.code in (SOLVED, OUTPUT),
                f"resume after the kill: {r.describe()}")
        c.check(not re.search(r"(?i)no checkpoint", r.stderr + r.stdout),
                f"resume said there is no checkpoint: {r.describe()}")
        if r.code == OUTPUT:
            c.failed_with(r, OUTPUT)
    c.require(outcomes[-1].code == SOLVED, f"the last resume: {outcomes[-1].describe()}")
    check_x(c, out, big.x_numpy)
    finished_dir(c, ckpt)

for moment in ("job.json written", "factorization under way"):
    with suite.case(f"9: SIGKILL to every process, {moment}, before any checkpoint: resume "
                    "starts from column 0 and reaches the right X") as c:
        ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
        # No periodic checkpoint: none exists until the run is asked to stop.
        job = Job(suite, big_solve(out, ckpt, "--checkpoint-every", "1000", "--progress"),
                  RANKS)
        if moment == "job.json written":
            while job.running() and not (ckpt / "job.json").exists():
                time.sleep(POLL)
        else:
            job.announced(r"factorization\s+[\d.]+ %")
        running = job.running()
        job.kill()
        run = job.wait()
        c.require(running, f"the run ended before the kill: {run.describe()}")
        c.require(committed(ckpt) is None, "a checkpoint existed already at the kill")
        c.require((ckpt / "job.json").exists(), "no job.json: the run had not recorded its job")
        grid = ["--grid", "2x2"] if moment == "job.json written" else []
        run = suite.run("resume", ckpt, *grid, ranks=4 if grid else RANKS)
        c.succeeded(run)
        check_x(c, out, big.x_numpy)
        finished_dir(c, ckpt)

# ---------------------------------------------------------------------------------------------
# (7) The printed resume command, --force kept


def printed_command(run):
    """The resume command gridlu printed, from its launcher on, as a list of words."""
    launchers = {"mpiexec", "mpirun", "orterun", "prterun", "srun"}
    for line in (run.stdout + "\n" + run.stderr).splitlines():
        if " resume " not in line:
            continue
        words = line.split()
        for i, w in enumerate(words):
            if os.path.basename(w) in launchers:
                return shlex.split(" ".join(words[i:]))
    return None


for ranks, grid in ((2, []), (3, ["--grid", "1x3"])):
    with suite.case(f"7: solve --force --checkpoint over an existing --out on {ranks} ranks, "
                    f"stopped: `mpiexec -n {ranks} ... resume DIR` as printed replaces it") as c:
        system = Small(c.dir / "system.h5")
        ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
        write_h5(out, {"X": np.zeros((SMALL_N, 2))})
        kept = digest(out)
        run = suite.run(*system.solve(out, "--force", *grid), "--checkpoint", ckpt,
                        "--stop-after", AT_ONCE, ranks=ranks)
        c.require(run.code == STOPPED, f"expected exit 5: {run.describe()}")
        c.check(digest(out) == kept, "the stopped run changed the existing --out")
        words = printed_command(run)
        c.require(words, f"no resume command printed:\n{run.stdout}{run.stderr}")
        c.check(os.path.basename(words[0]) == "mpiexec" and words[1:3] == ["-n", str(ranks)],
                f"the printed command does not start with `mpiexec -n {ranks}`: {words}")
        c.require("resume" in words[2:],
                  f"the printed command is not `LAUNCHER ... EXE resume DIR`: {words}")
        at = words.index("resume")
        c.check(os.path.realpath(words[at - 1]) == os.path.realpath(suite.gridlu),
                f"the printed command runs {words[at - 1]}, not {suite.gridlu}")
        c.require(len(words) > at + 1, f"the printed command names no directory: {words}")
        c.check(os.path.isabs(words[at + 1]) and Path(words[at + 1]).resolve() == ckpt.resolve(),
                f"the printed command does not resume {ckpt} by its absolute path: {words}")
        # As printed, with the harness's own launcher in place of the printed one.
        resumed = suite.run(*words[at:], ranks=ranks)
        c.succeeded(resumed)
        check_x(c, out, system.x)
        finished_dir(c, ckpt)

# ---------------------------------------------------------------------------------------------
# (8) Pivots edited, checksum recomputed

MASK = (1 << 64) - 1


def mix64(z):
    """splitmix64's finalizer, as include/gridlu/generate.hpp's detail::mix64."""
    z = ((z ^ (z >> 30)) * 0xbf58476d1ce4e5b9) & MASK
    z = ((z ^ (z >> 27)) * 0x94d049bb133111eb) & MASK
    return z ^ (z >> 31)


def pivots_checksum(pivots):
    """XOR over i of detail::entry_hash(i, 0, pivots[i]) for 64-bit pivots: the position
    hash, then the value's two 32-bit words in memory order (little-endian)."""
    total = 0
    for i, p in enumerate(np.asarray(pivots, dtype=np.int64).tolist()):
        h = mix64(((i * 0x9e3779b97f4a7c15) & MASK) ^ mix64(0))
        v = p & MASK
        for word in (v & 0xFFFFFFFF, v >> 32):
            h = mix64(h ^ word)
        total ^= h
    return total


def set_checksum(f, value):
    """Write the pivots_checksum attribute in the form and type gridlu wrote it."""
    old = f.attrs["pivots_checksum"]
    new = f"0x{value:016x}"
    if isinstance(old, (bytes, np.bytes_)):
        f.attrs.modify("pivots_checksum", np.bytes_(new.encode()))
    else:
        f.attrs.modify("pivots_checksum", new)


def stopped_with_pivots(c, system, ckpt, out):
    """A fresh stopped job in `ckpt`; its pivots and stored checksum."""
    stopped_at_once(c, system.solve(out), ckpt)
    with h5py.File(ckpt / "checkpoint.h5", "r") as f:
        return f["pivots"][()], text(f.attrs["pivots_checksum"])


def edit_pivots(ckpt, step=None, value=None):
    """Set pivot `step` to `value` (none: leave them) and store the checksum gridlu would
    compute for the result."""
    with h5py.File(ckpt / "checkpoint.h5", "r+") as f:
        edited = f["pivots"][()]
        if step is not None:
            edited[step] = value
            f["pivots"][...] = edited
        set_checksum(f, pivots_checksum(edited))


with suite.case("8: checkpoint with pivots edited (n + 5, -1, 2^40, below their step), "
                "checksum recomputed: resume exits 3 with one line") as c:
    system = Small(c.dir / "system.h5")
    out = c.dir / "x.h5"
    edits = {"n + 5": (3, SMALL_N + 5), "-1": (3, -1), "2^40": (-1, 1 << 40),
             "below its step": (5, 0)}
    for name, (step, value) in edits.items():
        ckpt = c.dir / f"edited_{name.replace(' ', '_').replace('^', '')}"
        pivots, stored = stopped_with_pivots(c, system, ckpt, out)
        c.require(len(pivots) >= 8, f"only {len(pivots)} pivots in the checkpoint")
        # The reimplementation must reproduce gridlu's own sum, or the edits would be refused
        # for a checksum mismatch rather than for their values.
        c.require(stored == f"0x{pivots_checksum(pivots):016x}",
                  f"the checksum reimplemented here gives 0x{pivots_checksum(pivots):016x}, "
                  f"gridlu stored {stored}")
        edit_pivots(ckpt, step % len(pivots), value)
        # Bytes compared: a resume may record the (unchanged) job again before it looks at
        # the state.
        before = state_of(ckpt, identity=False)
        run = suite.run("resume", ckpt, ranks=RANKS)
        c.check(not run.hung and run.code == DATA and len(run.gridlu_lines()) == 1 and
                run.gridlu_lines()[0].startswith("gridlu: error: "),
                f"pivot {name} at step {step}: expected exit 3 and one error line: "
                f"{run.describe()}")
        c.check(not out.exists(), f"pivot {name}: resume wrote X")
        same_state(c, before, ckpt, f"the edited checkpoint directory ({name})", identity=False)
    # Control: the checksum rewritten by this script, pivots unchanged: resume completes, so
    # the refusals above were for the pivots' values, not for the rewrite.
    ckpt = c.dir / "control"
    stopped_with_pivots(c, system, ckpt, out)
    edit_pivots(ckpt)
    c.succeeded(suite.run("resume", ckpt, ranks=RANKS))
    check_x(c, out, system.x)

# ---------------------------------------------------------------------------------------------
# (10) Resume of a finished job

with suite.case("10: finished job: working state removed (said so); resume with X present: "
                "exit 0, nothing to do, X untouched") as c:
    system = Small(c.dir / "system.h5")
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    run = suite.run(*system.solve(out, "--checkpoint", ckpt), ranks=RANKS)
    c.succeeded(run)
    check_x(c, out, system.x)
    finished_dir(c, ckpt)
    c.check(re.search(r"(?i)(remov|delet)", run.stdout),
            f"stdout does not say the working state was removed:\n{run.stdout}")
    before = state_of(c.dir)
    run = suite.run("resume", ckpt, ranks=1)
    c.succeeded(run)
    c.check("nothing to do" in run.stdout, f"resume of a finished job says:\n{run.stdout}")
    same_state(c, before, c.dir, "the case directory")

with suite.case("10: finished job with --save-factors, X deleted: resume writes X again (3 "
                "ranks); resume --out OTHER writes OTHER") as c:
    system = Small(c.dir / "system.h5")
    ckpt, out, factors = c.dir / "ckpt", c.dir / "x.h5", c.dir / "factors.h5"
    c.succeeded(suite.run(*system.solve(out, "--checkpoint", ckpt, "--save-factors", factors),
                          ranks=RANKS))
    finished_dir(c, ckpt)
    kept = digest(factors)
    out.unlink()
    c.succeeded(suite.run("resume", ckpt, "--grid", "1x3", ranks=3))
    check_x(c, out, system.x)
    out.unlink()
    other = c.dir / "other.h5"
    c.succeeded(suite.run("resume", ckpt, "--out", other, ranks=RANKS))
    check_x(c, other, system.x)
    c.check(not out.exists(), "resume --out OTHER wrote the job's own --out")
    c.check(digest(factors) == kept, "the factors file changed")
    finished_dir(c, ckpt)

with suite.case("10: finished job without factors, X deleted: resume and resume --out OTHER "
                "exit 3 with one line saying why, nothing written") as c:
    system = Small(c.dir / "system.h5")
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    c.succeeded(suite.run(*system.solve(out, "--checkpoint", ckpt), ranks=RANKS))
    finished_dir(c, ckpt)
    out.unlink()
    before = state_of(c.dir)
    line = c.failed_with(suite.run("resume", ckpt, ranks=RANKS), DATA, re.escape(out.name))
    c.check(re.search(r"(?i)factor|working state|removed|no longer|not kept|deleted|missing",
                      line), f"the line does not say why X cannot be written again: {line!r}")
    same_state(c, before, c.dir, "the case directory")
    other = c.dir / "other.h5"
    c.failed_with(suite.run("resume", ckpt, "--out", other, ranks=RANKS), DATA)
    same_state(c, before, c.dir, "the case directory")

suite.finish()
