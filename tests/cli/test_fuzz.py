"""Fuzz test of every kind of file gridlu reads: input systems, saved factors, checkpoint
directories and solutions, mutated (headers, attributes, datasets, raw bytes, JSON) and fed
to the command that reads them. Every run must end, within a timeout, either with exit 3 and
exactly one `gridlu: error: ` line, or with exit 0 when the mutation left a usable file;
never with a signal, an internal error, MPI_Abort or a sanitizer report.

Time-bounded: cases run until --budget seconds have passed (default 90, which makes a few
hundred files on 2 cores in a release build), but never stop before --min-files files. The
cases follow from --seed alone: `--only K` runs case K again (with --keep DIR to keep its
files), whatever the budget.
"""

import argparse
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
import traceback
from collections import Counter, defaultdict
from concurrent.futures import FIRST_COMPLETED, ThreadPoolExecutor, wait
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import fuzz_mutations as fm  # noqa: E402
import harness  # noqa: E402


def own_options():
    """The fuzzer's options, taken out of sys.argv before harness.Suite parses the rest."""
    p = argparse.ArgumentParser(add_help=False)
    p.add_argument("--budget", type=float, default=90.0, help="seconds of fuzzing")
    p.add_argument("--seed", type=int, default=13031)
    p.add_argument("--min-files", type=int, default=300)
    # A run spends about 0.15 s of CPU and the rest waiting for the launcher (whose teardown
    # after a refusal alone takes 1-2 s), so four at once share 2 cores without crowding.
    # Most of a run is the launcher starting and ending ranks, idle time: runs overlap well.
    p.add_argument("--jobs", type=int, default=6, help="runs at once")
    p.add_argument("--timeout", type=float, default=30.0, help="seconds before a run is hung")
    p.add_argument("--only", default="", help="comma-separated case numbers to run")
    p.add_argument("--keep", default="", help="directory to copy each case's files into")
    options, rest = p.parse_known_args()
    sys.argv[1:] = rest
    return options


opts = own_options()
# Every solve syncs its outputs to disk, which on a busy disk costs more than the rest of a
# small run; nothing here is about durability, so memory-backed storage is used if there.
if "TMPDIR" not in os.environ and os.access("/dev/shm", os.W_OK):
    tempfile.tempdir = "/dev/shm"
suite = harness.Suite(__doc__)
started = time.monotonic()
print(f"fuzz seed {opts.seed}, budget {opts.budget:g} s, at least {opts.min_files} files",
      flush=True)

# Exit codes of the README.
OK, INTERNAL, USAGE, DATA, SINGULAR, RESOURCE = 0, 1, 2, 3, 4, 6
SANITIZER = re.compile(r"AddressSanitizer|LeakSanitizer|UndefinedBehaviorSanitizer|runtime error:")
CRASH = re.compile(r"MPI_ABORT|MPI_Abort|on signal \d+|Segmentation fault|core dumped|"
                   r"internal failure|terminate called")


# --- running gridlu ------------------------------------------------------------------------

def processes_of(root):
    """Pids of `root`'s descendants and of everything in its session: Open MPI's ranks may
    outlive mpiexec, and a hung run must go with all of them."""
    parent, session = {}, {}
    for entry in os.scandir("/proc"):
        if not entry.name.isdigit():
            continue
        try:
            stat = Path(entry.path, "stat").read_text()
        except OSError:
            continue
        fields = stat[stat.rindex(")") + 2:].split()
        parent[int(entry.name)], session[int(entry.name)] = int(fields[1]), int(fields[3])
    found = {pid for pid, sid in session.items() if sid == root}
    grew = True
    while grew:
        more = {pid for pid, ppid in parent.items() if ppid in found | {root}} - found
        found |= more
        grew = bool(more)
    return found - {root}


def kill_all(root):
    for pid in processes_of(root) | {root}:
        try:
            os.kill(pid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass


# Open MPI probes for network transports at every start, a third of a small run's time;
# nothing here depends on the transport, so the shared-memory one is taken unless set.
RUN_ENV = dict(os.environ)
RUN_ENV.setdefault("OMPI_MCA_pml", "ob1")


def run(args, ranks, cwd):
    """gridlu ARGS under mpiexec, in a session of its own; a run past the timeout is killed
    with all its ranks and counts as hung."""
    argv = [suite.mpiexec, "-q", "-n", str(ranks), "--oversubscribe", suite.gridlu,
            *map(str, args)]
    begun = time.monotonic()
    proc = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            start_new_session=True, cwd=cwd, env=RUN_ENV)
    hung = False
    try:
        out, err = proc.communicate(timeout=opts.timeout)
    except subprocess.TimeoutExpired:
        hung = True
        kill_all(proc.pid)
        out, err = proc.communicate()
    kill_all(proc.pid)  # ranks left behind by a launcher that died
    r = harness.Run(argv, proc.returncode, out.decode(errors="replace"),
                    err.decode(errors="replace"), hung)
    r.seconds = time.monotonic() - begun
    return r


# --- the pool of valid files ---------------------------------------------------------------

POOL = suite.root / "pool"
POOL.mkdir()
rng0 = np.random.default_rng(opts.seed)


class Source:
    """A valid file or directory to mutate copies of, with what its reader needs."""

    def __init__(self, kind, path, n, **extra):
        self.kind, self.path, self.n = kind, Path(path), n
        self.extra = extra
        self.lock = threading.Lock()  # resumes of one checkpoint share its output path

    def __repr__(self):
        return f"{self.kind}:{self.path.name}"


def pool_run(what, args, ranks, codes):
    r = run(args, ranks, POOL)
    return None if not r.hung and r.code in codes else f"cannot make the pool ({what}): " + \
        r.describe()


def make_pool():
    # Small orders keep each run near the launcher's own cost; several types and shapes of
    # B so that every reading path (real, complex compound, 1-D, transposed) is fuzzed.
    specs = [("f64", 48, (48, 2), np.float64, False), ("c128", 40, (40,), np.complex128, False),
             ("f32", 36, (36, 3), np.float32, False), ("c64", 32, (32, 2), np.complex64, False),
             ("f64cm", 44, (44,), np.float64, True)]
    sources = defaultdict(list)
    solves = []
    for name, n, bshape, dtype, column_major in specs:
        a = harness.conditioned_matrix(rng0, n, dtype)
        b = harness.random_matrix(rng0, bshape, dtype)
        system = POOL / f"{name}.h5"
        harness.write_h5(system, {"A": a, "B": b})
        flags = ["--column-major"] if column_major else []
        sources["system"].append(Source("system", system, n, flags=flags))
        x, factors = POOL / f"{name}-x.h5", POOL / f"{name}-factors.h5"
        solves.append(("factors", ["solve", system, "--out", x, "--save-factors", factors,
                                   *flags], 1, (0,)))
        sources["factors"].append(Source("factors", factors, n, system=system, flags=flags))
        sources["solution"].append(Source("solution", x, n))
    # Checkpoints of stopped solves (a budget that runs out at the first block step) and
    # the directory of a finished one.
    orders = {s.path.stem: s.n for s in sources["system"]}
    for name, ranks in (("f64", 2), ("c128", 1), ("f32", 2), ("c64", 0)):
        ck, out = POOL / f"ck-{name}", POOL / f"ck-{name}-out"
        out.mkdir()
        finished = ranks == 0
        args = ["solve", POOL / f"{name}.h5", "--out", out / "x.h5", "--block", 8,
                "--checkpoint", ck] + ([] if finished else ["--stop-after", "0.00001"])
        solves.append(("checkpoint", args, ranks or 2, (0,) if finished else (5,)))
        sources["checkpoint"].append(Source("checkpoint", ck, orders[name], out=out / "x.h5",
                                            finished=finished))
    # A finished job that saved its factors: with its X gone, resume writes X again from
    # them, one more path by which factors are read.
    ck, out, factors = POOL / "ck-factors", POOL / "ck-factors-out", POOL / "ck-factors.h5"
    out.mkdir()
    solves.append(("finished checkpoint with factors",
                   ["solve", POOL / "f64.h5", "--out", out / "x.h5", "--save-factors", factors,
                    "--block", 8, "--checkpoint", ck], 2, (0,)))
    sources["finished job"].append(Source("finished job", ck, orders["f64"], out=out / "x.h5",
                                          factors=factors))
    with ThreadPoolExecutor(max_workers=opts.jobs) as workers:
        problems = [p for p in workers.map(lambda s: pool_run(*s), solves) if p]
    if problems:  # nothing to fuzz
        print("\n".join(problems))
        suite.failed += 1
        suite.finish()
    return sources


SOURCES = make_pool()
KINDS = [(3, "system"), (3, "factors"), (3, "checkpoint"), (1, "finished job"), (1, "solution")]
pool_seconds = time.monotonic() - started
print(f"pool of {sum(map(len, SOURCES.values()))} valid files made in {pool_seconds:.1f} s: "
      + ", ".join(f"{len(v)} {k}" for k, v in SOURCES.items()), flush=True)


def context(src):
    """What the mutations may know of a source: its order, and the datasets without which
    it cannot be read (a finished job needs no state)."""
    needed = {"system": {"/A", "/B"}, "factors": {"/LU", "/pivots"},
              "checkpoint": {"/work", "/pivots"}, "finished job": {"/LU", "/pivots"},
              "solution": set()}[src.kind]
    if src.extra.get("finished"):
        needed = set()
    square = {"/A", "/LU", "/work"}
    return {"n": src.n, "needed": needed, "square": square}


# --- one case ------------------------------------------------------------------------------

class Case:
    def __init__(self, index):
        self.index = index
        self.rng = np.random.default_rng([opts.seed, index])
        self.kind = fm.weighted(self.rng, KINDS)
        self.src = fm.pick(self.rng, SOURCES[self.kind])
        self.dir = suite.root / f"case-{index}"
        self.mutation = None
        self.runs = []  # (consumer, Run, problems)
        self.broken = None

    def make(self):
        """The mutated copy: a file, or a whole checkpoint directory."""
        self.dir.mkdir()
        ctx = context(self.src)
        if self.kind == "checkpoint":
            self.target = self.dir / "ckpt"
            fm.copy_tree(self.src.path, self.target)
            self.mutation = fm.mutate_directory(self.rng, self.target, ctx)
            if self.src.extra["finished"]:
                self.mutation.expect = fm.ANY  # whatever is left of a finished job's state
            return
        if self.kind == "finished job":
            self.target = self.dir / "ckpt"
            fm.copy_tree(self.src.path, self.target)
            factors, self.x = self.dir / "factors.h5", self.dir / "x.h5"
            shutil.copy(self.src.extra["factors"], factors)
            relocate(self.target, {str(self.src.extra["factors"]): str(factors),
                                   str(self.src.extra["out"]): str(self.x)})
            if self.rng.random() < 0.6:
                how = fm.weighted(self.rng, [(3, fm.mutate_h5), (1, fm.mutate_raw)])
                self.mutation = how(self.rng, factors, ctx)
                self.mutation.detail = f"factors: {self.mutation.detail}"
            else:
                self.mutation = fm.mutate_directory(self.rng, self.target, ctx)
                self.mutation.expect = fm.ANY  # without its record, the job may start over
            return
        self.target = self.dir / self.src.path.name
        shutil.copy(self.src.path, self.target)
        how = fm.weighted(self.rng, [(3, fm.mutate_h5), (1, fm.mutate_raw)])
        try:
            self.mutation = how(self.rng, self.target, ctx)
        except fm.NotApplicable:
            shutil.copy(self.src.path, self.target)
            self.mutation = fm.mutate_raw(self.rng, self.target, ctx)

    def consumers(self):
        """(name, args, ranks, output to check afterwards) of each command to run."""
        ranks = 1 + int(self.rng.integers(2))
        out = self.dir / "out"
        out.mkdir()
        x = out / "x.h5"
        flags = self.src.extra.get("flags", [])
        found = []
        if self.kind == "system":
            found.append(("solve", ["solve", self.target, "--out", x, *flags], ranks, out))
        elif self.kind == "factors":
            found.append(("solve --factors", ["solve", self.src.extra["system"], "--factors",
                                              self.target, "--out", x, *flags], ranks, out))
        elif self.kind == "finished job":
            found.append(("resume", ["resume", self.target], ranks, None))
        elif self.kind == "checkpoint":
            if self.rng.random() < 0.75:
                found.append(("resume", ["resume", self.target], ranks, None))
            else:
                found.append(("info DIR", ["info", self.target], 1, None))
        else:
            found.append(("info", ["info", self.target], 1, None))
        # Any HDF5 file may be shown; a few of the other kinds are shown as well.
        if self.kind in ("system", "factors") and self.rng.random() < 0.2:
            found.append(("info", ["info", self.target], 1, None))
        return found

    def execute(self):
        try:
            self._execute()
        except Exception:  # a broken case must not stop the fuzzing
            self.broken = traceback.format_exc()
        return self

    def _execute(self):
        self.make()
        for name, args, ranks, out in self.consumers():
            if name == "resume" and self.kind == "finished job":
                r = run(args, ranks, self.dir)
                problems = judge(self, name, r)
                if r.code == OK and not self.x.exists():
                    problems.append("exit 0 but X was not written again")
            elif name == "resume":
                with self.src.lock:
                    r = run(args, ranks, self.dir)
                    problems = judge(self, name, r)
                    problems += resume_leftovers(self, r)
            else:
                r = run(args, ranks, self.dir)
                problems = judge(self, name, r)
                if out is not None and r.code != OK and not r.hung:
                    left = sorted(os.listdir(out))
                    if left:
                        problems.append(f"refused but left {left} in the output directory")
            self.runs.append((name, r, problems))
        if opts.keep:
            shutil.copytree(self.dir, Path(opts.keep) / self.dir.name, dirs_exist_ok=True)
        shutil.rmtree(self.dir, ignore_errors=True)


def relocate(directory, moves):
    """Points the JSON files of a copied job directory at copies of its files: every string
    value equal to a key of `moves` becomes its value."""
    def move(v):
        if isinstance(v, dict):
            return {k: move(x) for k, x in v.items()}
        if isinstance(v, list):
            return [move(x) for x in v]
        return moves.get(v, v) if isinstance(v, str) else v
    for path in Path(directory).glob("*.json"):
        path.write_text(json.dumps(move(json.loads(path.read_text()))))


def resume_leftovers(case, r):
    """A resume writes the X its checkpoint names: the next case of the same checkpoint
    needs that path free again (an unfinished job) or the X in place (a finished one)."""
    problems = []
    x = case.src.extra["out"]
    if case.src.extra["finished"]:
        if not x.exists():
            problems.append(f"the finished job's X {x} was removed")
            shutil.copy(POOL / "c64-x.h5", x)
        return problems
    if x.exists():
        if r.code != OK:
            problems.append(f"refused (exit {r.code}) but wrote {x}")
        x.unlink()
    for leftover in os.listdir(x.parent):
        problems.append(f"left {leftover} beside X")
        shutil.rmtree(x.parent / leftover, ignore_errors=True)
    return problems


def judge(case, consumer, r):
    """What is wrong with run `r` of this case's file by `consumer` (empty: nothing)."""
    m = case.mutation
    if r.hung:
        return [f"hung: no end within {opts.timeout:g} s"]
    problems = []
    if SANITIZER.search(r.stderr):
        problems.append("sanitizer report")
    if CRASH.search(r.stderr):
        problems.append("crash: " + CRASH.search(r.stderr).group(0))
    if "HDF5-DIAG" in r.stderr:
        problems.append("HDF5's error stack printed")
    errors = [line for line in r.stderr.splitlines() if line.startswith("gridlu: error: ")]
    code = r.code
    if code == OK:
        if errors:
            problems.append(f"exit 0 with {len(errors)} error line(s)")
        # `info` shows whatever HDF5 can open; it must refuse only files HDF5 cannot.
        must = m.expect == fm.REFUSE if not consumer.startswith("info") else \
            consumer == "info" and m.family in ("raw-truncate", "raw-replace")
        if must:
            problems.append("exit 0 for a file it must refuse")
        return problems
    allowed = {DATA} | ({USAGE} if m.usage_ok else set()) | \
              ({SINGULAR} if m.singular_ok or case.kind == "system" else set())
    if code == RESOURCE and (m.resource_ok or m.memory_ok and errors and
                             "memory" in errors[0].lower()):
        allowed.add(RESOURCE)
    if code < 0 or code > 128:
        problems.append(f"killed by signal {abs(code) if code < 0 else code - 128}")
    elif code == INTERNAL:
        problems.append("exit 1 (internal error)")
    elif code not in allowed:
        problems.append(f"exit {code}, expected {sorted(allowed)}")
    if len(errors) != 1:
        problems.append(f"{len(errors)} 'gridlu: error:' lines, expected one")
    return problems


# --- the loop ------------------------------------------------------------------------------

def case_numbers():
    if opts.only:
        yield from (int(k) for k in opts.only.split(","))
        return
    k = 0
    while True:
        yield k
        k += 1


deadline = started + opts.budget
# Past the budget only to reach the minimum count, and within CTest's 600 s timeout; a
# machine too slow for even that fails. (Launching ranks took 5 s a run, not 1.3, in a
# freshly made Debian 12 chroot.)
hard_stop = started + max(4 * opts.budget, 480)
done, failures = [], []
stats = defaultdict(Counter)
seconds = defaultdict(list)  # wall time of each run, per command
numbers = case_numbers()
with ThreadPoolExecutor(max_workers=opts.jobs) as pool:
    pending = set()
    while True:
        now = time.monotonic()
        enough = len(done) + len(pending) >= opts.min_files or opts.only
        if not (now >= deadline and enough) and now < hard_stop:
            while len(pending) < opts.jobs:
                k = next(numbers, None)
                if k is None:
                    break
                pending.add(pool.submit(Case(k).execute))
        if not pending:
            break
        finished, pending = wait(pending, return_when=FIRST_COMPLETED)
        for future in finished:
            case = future.result()
            if case.broken:
                failures.append((None, "the fuzzer itself", None,
                                 [f"case {case.index} raised:\n{case.broken}"]))
                continue
            done.append(case)
            for name, r, problems in case.runs:
                label = "FAIL" if problems else f"exit {r.code}"
                stats[(case.kind, case.mutation.family)][label] += 1
                seconds[name].append(r.seconds)
                if problems:
                    failures.append((case, name, r, problems))

elapsed = time.monotonic() - started
runs = sum(len(c.runs) for c in done)
print(f"made {len(done)} files, {runs} runs in {elapsed:.1f} s "
      f"({pool_seconds:.1f} s for the pool), seed {opts.seed}", flush=True)

print("seconds per run: " + ", ".join(f"{name} {np.median(t):.2f} (median of {len(t)}, "
                                     f"longest {max(t):.1f})" for name, t in seconds.items()))
# Counts per kind and mutation, and the exit codes they ended with.
labels = sorted({label for c in stats.values() for label in c}, key=lambda s: (s == "FAIL", s))
print(f"{'kind':<13} {'mutation':<22} " + " ".join(f"{lab:>7}" for lab in labels))
for key in sorted(stats):
    print(f"{key[0]:<13} {key[1]:<22} " + " ".join(f"{stats[key][lab] or '':>7}"
                                                   for lab in labels))


def report(case, name, r, problems):
    lines = [f"case {case.index}: {case.kind} from {case.src.path.name}, "
             f"{case.mutation.family}: {case.mutation.detail}",
             f"{name} -> {'; '.join(problems)}",
             f"again: {sys.executable} {__file__} --gridlu {suite.gridlu} --mpiexec "
             f"{suite.mpiexec} --seed {opts.seed} --only {case.index} --keep /tmp/fuzz-case"]
    if r is not None:
        lines.append(r.describe())
    return "\n".join(lines)


for kind in [k for _, k in KINDS]:
    with suite.case(f"fuzzed {kind} files: no crash, hang or sanitizer report") as c:
        mine = [f for f in failures if f[0] is not None and f[0].kind == kind]
        # One example per kind of failure; the counts above say how many there were.
        shown = Counter()
        for case, name, r, problems in mine:
            signature = (case.mutation.family, name, problems[0][:40])
            shown[signature] += 1
            if shown[signature] <= 2:
                c.check(False, report(case, name, r, problems))
        extra = len(mine) - sum(min(v, 2) for v in shown.values())
        c.check(not extra, f"and {extra} more failures like those above")

with suite.case("the fuzzer ran") as c:
    for _, _, _, problems in [f for f in failures if f[0] is None]:
        c.check(False, problems[0])
    if not opts.only:
        c.check(len(done) >= opts.min_files,
                f"made {len(done)} files, fewer than {opts.min_files}")

suite.finish()
