"""gridlu solve's outputs, end to end through mpiexec: an output that is an input (or another
output, or a file of the run's checkpoint directory) is refused before any work; outputs are
staged under unpredictable names and never written through a planted link; X holds any number
of right-hand sides; a full disk (a file-size limit) and an output that cannot be written are
output errors that leave nothing behind; factors are refused for their orientation. Every
refusal is checked to leave each input and each earlier output as it was, byte for byte."""

import hashlib
import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent / "checkpoint"))
import harness  # noqa: E402
from harness import (Run, conditioned_matrix, random_matrix, read_h5,  # noqa: E402
                     reference_solution, rel_diff, rel_tol, write_h5)
from checkpoint_support import Job  # noqa: E402

suite = harness.Suite(__doc__)
rng = np.random.default_rng(91013)
RANKS = 2
N = 120
USAGE, DATA, OUTPUT = 2, 3, 6
STAGE_PREFIX = ".gridlu-stage-"
POLL = 0.001


# ---------------------------------------------------------------------------------------------
# Helpers of this script

def new_system(path, n=N, nrhs=2, dtype=np.float64, nan_last=False):
    """Write a well-conditioned system to `path` with h5py; returns (A, B). With `nan_last`
    A's last entry is NaN: a run that reads A then fails with exit 3 naming A[n-1, n-1], so an
    exit 2 proves the refusal came before A was read."""
    a = conditioned_matrix(rng, n, dtype)
    b = random_matrix(rng, (n,) if nrhs is None else (n, nrhs), dtype)
    stored = a.copy()
    if nan_last:
        stored[n - 1, n - 1] = np.nan
    write_h5(path, {"A": stored, "B": b})
    return a, b


def dominant_system(path, n, nrhs):
    """A large system, cheap to make and to check: A = R + 2n I with R uniform in [-1, 1).
    ||R||_2 <= sqrt(||R||_1 ||R||_inf) < n, so cond_2(A) < (2n + n) / (2n - n) = 3."""
    a = rng.uniform(-1, 1, (n, n)) + 2 * n * np.eye(n)
    b = rng.uniform(-1, 1, (n, nrhs))
    write_h5(path, {"A": a, "B": b})
    return a, b


# Forward error bound of such a system: 100 n eps cond(A), as harness.rel_tol, with cond < 3.
def dominant_tol(n):
    return 100 * n * np.finfo(np.float64).eps * 3


def state_of(root):
    """Everything under `root`, by relative path: kind, inode, mtime and content hash of files
    (a symbolic link by its target, not followed). Two equal states mean nothing was created,
    removed, replaced or written."""
    found = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for name in dirnames + filenames:
            p = Path(dirpath) / name
            rel = str(p.relative_to(root))
            st = os.lstat(p)
            if os.path.islink(p):
                found[rel] = ("link", os.readlink(p))
            elif p.is_dir():
                found[rel] = ("dir", st.st_ino)
            else:
                found[rel] = ("file", st.st_ino, st.st_mtime_ns,
                              hashlib.sha256(p.read_bytes()).hexdigest())
    return found


def same_state(c, before, root, what="the case directory"):
    after = state_of(root)
    changed = sorted(k for k in before.keys() | after.keys() if before.get(k) != after.get(k))
    c.check(not changed, f"{what} changed at: {changed} "
                         f"(before: {[before.get(k) for k in changed]}, "
                         f"after: {[after.get(k) for k in changed]})")


def digest(path):
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def leftovers(directory):
    """Staging directories and temporary files of any naming scheme left in `directory`."""
    return [e for e in os.listdir(directory)
            if e.startswith(STAGE_PREFIX) or ".partial" in e or e.endswith(".tmp")]


def no_work_done(c, run):
    """Rank 0 printed no phase times: A was not read, nothing was factored."""
    c.check(not re.search(r"\bread\s+[\d.]+\s*s\b", run.stdout),
            f"a refused run printed timings:\n{run.stdout}")


def check_x(c, out, a, b, tol=None):
    """X in `out` is A^-1 B. reference: numpy.linalg.solve"""
    c.require(out.exists(), f"no X at {out}")
    x = read_h5(out, "X")
    c.require(x.shape == b.shape, f"X has shape {x.shape}, B {b.shape}")
    err = rel_diff(x, reference_solution(a, b))
    tol = rel_tol(a) if tol is None else tol
    c.check(err <= tol, f"||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > {tol:.2e}")


def run_limited(blocks, *args, ranks=RANKS):
    """gridlu ARGS on `ranks` ranks, each with a file-size limit of `blocks` 512-byte blocks
    (dash's unit for `ulimit -f`) set by a shell that then becomes gridlu."""
    argv = [suite.mpiexec, "-q", "-n", str(ranks), "--oversubscribe", "sh", "-c",
            f'ulimit -f {blocks} && exec "$0" "$@"', suite.gridlu, *map(str, args)]
    proc = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, cwd=suite.root)
    try:
        out, err = proc.communicate(timeout=harness.TIMEOUT_SECONDS)
        return Run(argv, proc.returncode, out, err, hung=False)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        out, err = proc.communicate()
        return Run(argv, proc.returncode, out, err, hung=True)


def as_text(value):
    """An HDF5 string attribute as str, whether h5py gives it as str or bytes."""
    if isinstance(value, np.ndarray) and value.size == 1:
        value = value.item()
    return value.decode() if isinstance(value, (bytes, np.bytes_)) else str(value)


def last_pid():
    return int(Path("/proc/sys/kernel/ns_last_pid").read_text())


# ---------------------------------------------------------------------------------------------
# (1) An output that is an input, another output or a checkpoint file: exit 2, nothing touched

def refused(c, args, ranks=RANKS, mention=None):
    """solve ARGS exits 2 with one line before reading A, and the case directory is
    exactly as it was (inputs' bytes, earlier outputs, no new file, no staging)."""
    before = state_of(c.dir)
    run = suite.run("solve", *args, ranks=ranks)
    c.failed_with(run, USAGE, mention)
    no_work_done(c, run)
    same_state(c, before, c.dir)
    return run


for force in ([], ["--force"]):
    with suite.case(f"solve in.h5 --out in.h5 {' '.join(force)}: exit 2, input kept") as c:
        new_system(c.dir / "in.h5")
        refused(c, [c.dir / "in.h5", "--out", c.dir / "in.h5", *force])

with suite.case("solve in.h5 --out in.h5 --force on 1 rank: exit 2, input kept") as c:
    new_system(c.dir / "in.h5")
    refused(c, [c.dir / "in.h5", "--out", c.dir / "in.h5", "--force"], ranks=1)

with suite.case("--out in.h5 spelled another way (./sub/../in.h5), --force: exit 2") as c:
    new_system(c.dir / "in.h5")
    (c.dir / "sub").mkdir()
    refused(c, [c.dir / "in.h5", "--out", c.dir / "sub" / ".." / "in.h5", "--force"])

with suite.case("--out a hard link to the input, --force: exit 2, input kept") as c:
    new_system(c.dir / "in.h5")
    os.link(c.dir / "in.h5", c.dir / "x.h5")
    refused(c, [c.dir / "in.h5", "--out", c.dir / "x.h5", "--force"])

with suite.case("--out a symlink to the input, --force: exit 2, input and link kept") as c:
    new_system(c.dir / "in.h5")
    os.symlink(c.dir / "in.h5", c.dir / "x.h5")
    refused(c, [c.dir / "in.h5", "--out", c.dir / "x.h5", "--force"])

with suite.case("input reached through a symlink, --out the real file, --force: exit 2") as c:
    new_system(c.dir / "in.h5")
    os.symlink("in.h5", c.dir / "link.h5")
    refused(c, [c.dir / "link.h5", "--out", c.dir / "in.h5", "--force"])

for force in ([], ["--force"]):
    with suite.case(f"--save-factors names the input {' '.join(force)}: exit 2, input kept") as c:
        new_system(c.dir / "in.h5")
        refused(c, [c.dir / "in.h5", "--out", c.dir / "x.h5", "--save-factors", c.dir / "in.h5",
                    *force])

with suite.case("--save-factors names the --out file, --force: exit 2, nothing written") as c:
    new_system(c.dir / "in.h5")
    refused(c, [c.dir / "in.h5", "--out", c.dir / "x.h5", "--save-factors", c.dir / "x.h5",
                "--force"])

with suite.case("--save-factors == --out, an earlier X there, --force: exit 2, X kept") as c:
    new_system(c.dir / "in.h5")
    write_h5(c.dir / "x.h5", {"X": np.arange(6.0)})
    refused(c, [c.dir / "in.h5", "--out", c.dir / "x.h5", "--save-factors", c.dir / "x.h5",
                "--force"])

for force in ([], ["--force"]):
    with suite.case(f"--report names the input {' '.join(force)}: exit 2, input kept") as c:
        new_system(c.dir / "in.h5")
        refused(c, [c.dir / "in.h5", "--out", c.dir / "x.h5", "--report", c.dir / "in.h5",
                    *force])

with suite.case("--report names the --out file, --force: exit 2") as c:
    new_system(c.dir / "in.h5")
    refused(c, [c.dir / "in.h5", "--out", c.dir / "x.h5", "--report", c.dir / "x.h5",
                "--force"])

with suite.case("--out names the --rhs-file, --force: exit 2, B's file kept") as c:
    a, b = new_system(c.dir / "in.h5")
    write_h5(c.dir / "rhs.h5", {"B": b})
    refused(c, [c.dir / "in.h5", "--rhs-file", c.dir / "rhs.h5", "--out", c.dir / "rhs.h5",
                "--force"])

with suite.case("--out names the --factors file, --force: exit 2, factors kept") as c:
    a, b = new_system(c.dir / "in.h5")
    c.succeeded(suite.run("solve", c.dir / "in.h5", "--out", c.dir / "x0.h5",
                          "--save-factors", c.dir / "factors.h5", ranks=RANKS))
    refused(c, [c.dir / "in.h5", "--factors", c.dir / "factors.h5", "--out",
                c.dir / "factors.h5", "--force"])

for name in ("checkpoint.h5", "job.json", "complete.json", "lock"):
    with suite.case(f"--out names DIR/{name} of the run's own --checkpoint DIR, --force: "
                    "exit 2") as c:
        new_system(c.dir / "in.h5")
        (c.dir / "ckpt").mkdir()
        refused(c, [c.dir / "in.h5", "--out", c.dir / "ckpt" / name, "--checkpoint",
                    c.dir / "ckpt", "--force"])

with suite.case("--out names DIR/checkpoint.h5 of a stopped job in DIR, --force: exit 2, "
                "its checkpoint kept") as c:
    new_system(c.dir / "in.h5", n=300)
    ckpt = c.dir / "ckpt"
    run = suite.run("solve", c.dir / "in.h5", "--out", c.dir / "x.h5", "--block", 32,
                    "--checkpoint", ckpt, "--stop-after", "0.000001", ranks=RANKS)
    c.require(run.code == 5 and (ckpt / "checkpoint.h5").exists(),
              f"expected a stopped run with a checkpoint: {run.describe()}")
    refused(c, [c.dir / "in.h5", "--out", ckpt / "checkpoint.h5", "--checkpoint", ckpt,
                "--force"])

with suite.case("--save-factors names DIR/checkpoint.h5 of its --checkpoint DIR: exit 2") as c:
    new_system(c.dir / "in.h5")
    (c.dir / "ckpt").mkdir()
    refused(c, [c.dir / "in.h5", "--out", c.dir / "x.h5", "--save-factors",
                c.dir / "ckpt" / "checkpoint.h5", "--checkpoint", c.dir / "ckpt", "--force"])

with suite.case("--checkpoint DIR is the input's directory and --out the input: exit 2") as c:
    new_system(c.dir / "in.h5")
    refused(c, [c.dir / "in.h5", "--out", c.dir / "in.h5", "--checkpoint", c.dir, "--force"])


# ---------------------------------------------------------------------------------------------
# (4) Staging: unpredictable names, created exclusively, never through a link

with suite.case("links planted at the old names .x.h5.partial-<pid> around mpiexec's pid: "
                "not followed, X right, victim and links untouched") as c:
    a, b = dominant_system(c.dir / "in.h5", n=1500, nrhs=3)
    out = c.dir / "x.h5"
    victim = c.dir / "victim.dat"
    victim.write_bytes(b"precious data, not gridlu's\n" * 1000)
    # The pids the coming mpiexec and its ranks will most likely get: the next few hundred.
    first = last_pid()
    for pid in range(first + 1, first + 300):
        os.symlink(victim, c.dir / f".x.h5.partial-{pid}")
    job = Job(suite, ["solve", c.dir / "in.h5", "--out", out, "--block", 64], RANKS)
    # And the ranks' own pids, with neighbours, once they are known (a link planted after
    # gridlu's start-up checks is the attack of issue 13).
    pids = job.rank_pids() + [job.proc.pid]
    for pid in {p + d for p in pids for d in range(-20, 21)}:
        link = c.dir / f".x.h5.partial-{pid}"
        if not os.path.lexists(link):
            os.symlink(victim, link)
    links = sorted(p.name for p in c.dir.iterdir() if p.name.startswith(".x.h5.partial-"))
    before = state_of(c.dir)
    run = job.wait()
    c.succeeded(run)
    check_x(c, out, a, b, dominant_tol(len(a)))
    before.pop("x.h5", None)
    after = state_of(c.dir)
    after.pop("x.h5", None)
    changed = sorted(k for k in before.keys() | after.keys() if before.get(k) != after.get(k))
    c.check(not changed, f"changed besides x.h5: {changed}")
    c.check(os.path.islink(out) is False, "x.h5 is a link")
    c.check(len(links) >= 300, f"only {len(links)} links planted")


def planted_during_run(c, force):
    """A link at the final --out name, to an unrelated file, planted once the factorization
    is under way (gridlu's checks done). Returns (run, victim, its digest, out, A, B)."""
    a, b = dominant_system(c.dir / "in.h5", n=3000, nrhs=2)
    out, victim = c.dir / "x.h5", c.dir / "victim.h5"
    write_h5(victim, {"data": np.arange(1000.0)})
    kept = digest(victim)
    job = Job(suite, ["solve", c.dir / "in.h5", "--out", out, "--block", 32, "--progress",
                      *force], RANKS)
    started = job.announced(r"factorization\s+[\d.]+ %")
    planted = started is not None and job.running()
    if planted:
        os.symlink(victim, out)
    run = job.wait()
    c.require(planted, f"no progress line while the run lasted: {run.describe()}")
    return run, victim, kept, out, a, b


with suite.case("link planted at --out during the run, no --force: exit 6, link and victim "
                "untouched, nothing staged left") as c:
    run, victim, kept, out, a, b = planted_during_run(c, [])
    c.failed_with(run, OUTPUT, re.escape(out.name))
    c.check(os.path.islink(out) and os.readlink(out) == str(victim),
            "the planted link was replaced or removed")
    c.check(digest(victim) == kept, "the file the link points to was written")
    c.check(not leftovers(c.dir), f"left behind: {leftovers(c.dir)}")

with suite.case("link planted at --out during the run, --force: the link itself replaced by "
                "X, victim untouched") as c:
    run, victim, kept, out, a, b = planted_during_run(c, ["--force"])
    c.succeeded(run)
    c.check(not os.path.islink(out), "--out is still a link: X went through it or nowhere")
    c.check(digest(victim) == kept, "the file the link pointed to was written")
    if out.exists() and not os.path.islink(out):
        check_x(c, out, a, b, dominant_tol(len(a)))
    c.check(not leftovers(c.dir), f"left behind: {leftovers(c.dir)}")

with suite.case("--out a link to an unrelated file, --force: link replaced, file untouched") \
        as c:
    a, b = new_system(c.dir / "in.h5")
    victim = c.dir / "victim.h5"
    write_h5(victim, {"data": np.arange(10.0)})
    kept = digest(victim)
    os.symlink(victim, c.dir / "x.h5")
    c.succeeded(suite.run("solve", c.dir / "in.h5", "--out", c.dir / "x.h5", "--force",
                          ranks=RANKS))
    c.check(not os.path.islink(c.dir / "x.h5"), "x.h5 is still a link")
    c.check(digest(victim) == kept, "the file behind the link was written")
    check_x(c, c.dir / "x.h5", a, b)


def observe_staging(c, tag):
    """A solve with large factors on 2 ranks, its output directory polled all along. Returns
    the staging directories seen (name -> mode) and the other names seen before the run
    ended, with the sizes of the outputs when they first appeared."""
    a, b = dominant_system(c.dir / f"in_{tag}.h5", n=2000, nrhs=1)
    outdir = c.dir / f"out_{tag}"
    outdir.mkdir()
    out, factors = outdir / "x.h5", outdir / "factors.h5"
    job = Job(suite, ["solve", c.dir / f"in_{tag}.h5", "--out", out, "--save-factors", factors],
              RANKS)
    stages, seen = {}, {}
    while True:
        running = job.running()
        try:
            for e in os.scandir(outdir):
                if e.name.startswith(STAGE_PREFIX):
                    try:
                        stages.setdefault(e.name, os.lstat(e.path).st_mode & 0o7777)
                    except FileNotFoundError:
                        pass
                elif e.name not in seen:
                    try:
                        seen[e.name] = os.lstat(e.path).st_size
                    except FileNotFoundError:
                        seen[e.name] = None
        except FileNotFoundError:
            pass
        if not running:
            break
        time.sleep(POLL)
    run = job.wait()
    c.succeeded(run)
    check_x(c, out, a, b, dominant_tol(len(a)))
    return stages, seen, out, factors


with suite.case("staging: private .gridlu-stage-XXXXXX dirs (0700), different in two runs; "
                "nothing named like an output appears unfinished") as c:
    runs = [observe_staging(c, tag) for tag in ("one", "two")]
    names = [set(stages) for stages, _, _, _ in runs]
    c.check(all(names), f"no staging directory seen in some run: {names}")
    c.check(not (names[0] & names[1]), f"two runs used the same staging names: {names}")
    for stages, seen, out, factors in runs:
        for name, mode in stages.items():
            c.check(re.fullmatch(re.escape(STAGE_PREFIX) + r"[A-Za-z0-9]{6,}", name),
                    f"staging name {name!r} is not {STAGE_PREFIX}XXXXXX")
            c.check(mode == 0o700, f"staging directory {name} has mode {oct(mode)}")
        c.check(set(seen) <= {out.name, factors.name},
                f"names seen in the output directory during the run: {sorted(seen)}")
        # An output appears by rename, whole: the size it had when first seen is its final one.
        for path in (out, factors):
            if path.name in seen:
                c.check(seen[path.name] == path.stat().st_size,
                        f"{path.name} first seen with {seen[path.name]} bytes, ends with "
                        f"{path.stat().st_size}")
        c.check(not leftovers(out.parent), f"left behind: {leftovers(out.parent)}")


# ---------------------------------------------------------------------------------------------
# (5) Any number of right-hand sides

with suite.case("10,000 right-hand sides at N = 40: X, per-RHS figures, report (h5py, numpy)") \
        as c:
    n, k = 40, 10_000
    a = conditioned_matrix(rng, n, np.float64)
    b = random_matrix(rng, (n, k), np.float64)
    write_h5(c.dir / "in.h5", {"A": a, "B": b})
    out, report = c.dir / "x.h5", c.dir / "report.json"
    run = suite.run("solve", c.dir / "in.h5", "--out", out, "--report", report, ranks=RANKS)
    c.succeeded(run)
    with h5py.File(out, "r") as f:  # reference: h5py reads what gridlu wrote
        x = f["X"][()]
        c.require("normwise_backward_errors" in f,
                  f"no normwise_backward_errors dataset; file holds {list(f)}")
        errs = f["normwise_backward_errors"][()]
        lists = {name: f[name].shape for name in
                 ("componentwise_backward_errors", "forward_error_bounds") if name in f}
        worst = f["X"].attrs.get("normwise_backward_error")
        kind = f.attrs.get("gridlu_kind")
        root = set(f.attrs)
    c.require(x.shape == (n, k), f"X has shape {x.shape}")
    x_ref = reference_solution(a, b)  # reference: numpy.linalg.solve
    err, tol = rel_diff(x, x_ref), rel_tol(a)
    c.check(err <= tol, f"||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > {tol:.2e}")
    worst_col = np.abs(x - x_ref).max(axis=0) / np.abs(x_ref).max(axis=0)
    c.check(worst_col.max() <= tol, f"column {worst_col.argmax()} off by {worst_col.max():.2e}")
    c.check(errs.shape == (k,), f"normwise_backward_errors has shape {errs.shape}, expected ({k},)")
    c.check(lists == {"componentwise_backward_errors": (k,), "forward_error_bounds": (k,)},
            f"the other per-RHS datasets: {lists}")
    # reference: the normwise backward error of each column, evaluated with numpy
    r = b - a @ x
    mine = np.abs(r).max(axis=0) / (np.abs(a).sum(axis=1).max() * np.abs(x).max(axis=0) +
                                    np.abs(b).max(axis=0))
    threshold = 10 * n * np.finfo(np.float64).eps  # the usual level for LU (common practice)
    if errs.shape == (k,):
        c.check(np.all(np.isfinite(errs)) and errs.max() <= threshold,
                f"backward errors up to {errs.max():.2e} > 10 n eps = {threshold:.2e}")
        c.check(np.all(mine <= threshold), f"numpy finds backward errors up to {mine.max():.2e}")
        if worst is not None:
            c.check(np.isclose(float(np.asarray(worst).ravel()[0]), errs.max(), rtol=1e-6),
                    f"X's normwise_backward_error {worst} is not the largest of "
                    f"normwise_backward_errors {errs.max()}")
    c.check(worst is not None, "X lacks the attribute normwise_backward_error")
    c.check(kind is not None and as_text(kind) == "solution", f"gridlu_kind = {kind!r}")
    wanted = {"gridlu_format", "gridlu_version", "job_id", "input", "output", "matrix_dataset"}
    c.check(wanted <= root, f"X's file lacks the root attributes {sorted(wanted - root)}")
    data = json.loads(report.read_text())
    c.check(len(data.get("normwise_backward_errors", [])) == k,
            f"the report has {len(data.get('normwise_backward_errors', []))} backward errors")


# ---------------------------------------------------------------------------------------------
# (6) Output failures: exit 6 and nothing left; unwritable targets: exit 2 before reading A

# A rank's MPI start-up creates 4 MiB shared-memory files, so the limit must exceed that:
# 8 MiB, in dash's 512-byte blocks.
LIMIT_BYTES = 8 << 20
LIMIT_BLOCKS = LIMIT_BYTES // 512

_limit_ok = []


def limit_allows_start(c):
    """The limit leaves MPI's start-up alone: a demo (which writes no file) runs under it.
    Otherwise the cases below would see MPI fail, not gridlu's writes."""
    if not _limit_ok:
        _limit_ok.append(run_limited(LIMIT_BLOCKS, "demo", "random", "--n", 64, "--rhs", 1))
    run = _limit_ok[0]
    c.require(run.code == 0, f"under the file-size limit even a demo fails: {run.describe()}")


with suite.case("file-size limit below X's size: exit 6, no X, nothing staged, input kept") \
        as c:
    limit_allows_start(c)
    n, k = 200, 12_000  # X: 19.2 MB, twice the limit; nothing else is written before it
    dominant_system(c.dir / "in.h5", n, k)
    c.require(n * k * 8 > 2 * LIMIT_BYTES, "X would fit under the limit")
    (c.dir / "out").mkdir()
    kept = digest(c.dir / "in.h5")
    run = run_limited(LIMIT_BLOCKS, "solve", c.dir / "in.h5", "--out", c.dir / "out" / "x.h5")
    c.failed_with(run, OUTPUT)
    c.check(os.listdir(c.dir / "out") == [], f"left in the output directory: "
                                              f"{os.listdir(c.dir / 'out')}")
    c.check(digest(c.dir / "in.h5") == kept, "the input changed")

with suite.case("file-size limit below the factors' size: exit 6, no factors, nothing staged") \
        as c:
    limit_allows_start(c)
    n = 1500  # factors: 18 MB; X: 12 kB
    a, b = dominant_system(c.dir / "in.h5", n=n, nrhs=1)
    (c.dir / "out").mkdir()
    out, factors = c.dir / "out" / "x.h5", c.dir / "out" / "factors.h5"
    kept = digest(c.dir / "in.h5")
    run = run_limited(LIMIT_BLOCKS, "solve", c.dir / "in.h5", "--out", out,
                      "--save-factors", factors)
    c.failed_with(run, OUTPUT)
    c.check(not factors.exists(), "a factors file was left")
    c.check(not leftovers(c.dir / "out"), f"left behind: {leftovers(c.dir / 'out')}")
    # X may have been stored before the factors failed; if so it must be whole and right.
    if out.exists():
        check_x(c, out, a, b, dominant_tol(n))
    c.check(digest(c.dir / "in.h5") == kept, "the input changed")


def refused_before_reading(c, *options, n=N):
    """solve, with A's last entry NaN, refused with exit 2 (not 3: A was not read) and the
    case directory left as it was."""
    new_system(c.dir / "in.h5", n=n, nan_last=True)
    before = state_of(c.dir)
    run = suite.run("solve", c.dir / "in.h5", *options, ranks=RANKS)
    c.failed_with(run, USAGE)
    no_work_done(c, run)
    same_state(c, before, c.dir)


with suite.case("--out in a directory that does not exist: exit 2 before reading A") as c:
    refused_before_reading(c, "--out", c.dir / "missing" / "x.h5")

with suite.case("--out an existing directory: exit 2 before reading A, directory kept") as c:
    (c.dir / "x.h5").mkdir()
    (c.dir / "x.h5" / "inside").write_text("kept\n")
    refused_before_reading(c, "--out", c.dir / "x.h5")

with suite.case("--out an existing directory, --force: exit 2 before reading A") as c:
    (c.dir / "x.h5").mkdir()
    refused_before_reading(c, "--out", c.dir / "x.h5", "--force")

with suite.case("--report in a directory that does not exist: exit 2 before reading A, no X") \
        as c:
    refused_before_reading(c, "--out", c.dir / "x.h5", "--report", c.dir / "missing" / "r.json")

with suite.case("--report an existing directory: exit 2 before reading A") as c:
    (c.dir / "r.json").mkdir()
    refused_before_reading(c, "--out", c.dir / "x.h5", "--report", c.dir / "r.json", "--force")

with suite.case("--save-factors in a directory that does not exist: exit 2 before reading A") \
        as c:
    refused_before_reading(c, "--out", c.dir / "x.h5", "--save-factors",
                           c.dir / "missing" / "f.h5")

with suite.case("--save-factors file exists, no --force: exit 2 before reading A, kept") as c:
    write_h5(c.dir / "f.h5", {"LU": np.eye(3)})
    refused_before_reading(c, "--out", c.dir / "x.h5", "--save-factors", c.dir / "f.h5")

with suite.case("N = 3000, --out in a missing directory: exit 2 with no timings, quickly") \
        as c:
    # A large A as well: reading 72 MB and factoring would show in time and on stdout.
    dominant_system(c.dir / "in.h5", n=3000, nrhs=1)
    kept = digest(c.dir / "in.h5")
    started = time.monotonic()
    run = suite.run("solve", c.dir / "in.h5", "--out", c.dir / "missing" / "x.h5", ranks=RANKS)
    seconds = time.monotonic() - started
    c.failed_with(run, USAGE)
    no_work_done(c, run)
    c.check(digest(c.dir / "in.h5") == kept, "the input changed")
    c.check(not (c.dir / "missing").exists(), "the missing directory was created")
    c.check(seconds < 20, f"the refusal took {seconds:.1f} s")


# ---------------------------------------------------------------------------------------------
# (10b) Factors are refused for their orientation, not as "another matrix"

def orientation_case(c, saved_column_major):
    """Factors saved from one file with (or without) --column-major, then used with the same
    file and the flag dropped (or added): A as read is then the transpose of the factored
    matrix, and the refusal must say that the orientation differs (exit 2), not that the
    matrix does. The factors file and the input stay untouched."""
    a, b = new_system(c.dir / "plain.h5")
    source = c.dir / "in.h5"
    # As a column-major writer stores A: the dataset holds the transpose.
    write_h5(source, {"A": a.T.copy() if saved_column_major else a, "B": b})
    flag = ["--column-major"] if saved_column_major else []
    factors = c.dir / "factors.h5"
    c.succeeded(suite.run("solve", source, "--out", c.dir / "x0.h5", "--save-factors", factors,
                          *flag, ranks=RANKS))
    check_x(c, c.dir / "x0.h5", a, b)  # the orientation was understood when saving
    other = [] if saved_column_major else ["--column-major"]
    before = state_of(c.dir)
    run = suite.run("solve", source, "--factors", factors, "--out", c.dir / "x1.h5", *other,
                    ranks=RANKS)
    line = c.failed_with(run, USAGE, r"(?i)column.major|row.major|orientation|transpos")
    c.check(not re.search(r"(?i)matrix differs|differs from theirs", line),
            f"refused as a different matrix: {line!r}")
    same_state(c, before, c.dir)


with suite.case("factors saved with --column-major, reused without it: exit 2, orientation "
                "named") as c:
    orientation_case(c, saved_column_major=True)

with suite.case("factors saved row-major, reused with --column-major: exit 2, orientation "
                "named") as c:
    orientation_case(c, saved_column_major=False)

with suite.case("factors saved with --column-major, reused with it on 3 ranks: X right") as c:
    a, b = new_system(c.dir / "plain.h5")
    write_h5(c.dir / "transposed.h5", {"A": a.T.copy(), "B": b})
    factors = c.dir / "factors.h5"
    c.succeeded(suite.run("solve", c.dir / "transposed.h5", "--column-major", "--out",
                          c.dir / "x0.h5", "--save-factors", factors, ranks=RANKS))
    kept = digest(factors)
    c.succeeded(suite.run("solve", c.dir / "transposed.h5", "--column-major", "--factors",
                          factors, "--out", c.dir / "x1.h5", ranks=3))
    check_x(c, c.dir / "x1.h5", a, b)
    c.check(digest(factors) == kept, "the factors file changed when used")

suite.finish()
