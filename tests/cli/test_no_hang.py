"""A failure on one rank ends the whole job: one `gridlu: error:` line, a documented exit
code, within seconds, nothing half-written in place of an output or a checkpoint.

Each case fails one rank only: an input it cannot see (ranks started in other working
directories), a file it sees differently, and every fault point of GRIDLU_FAULT
(src/comm/fault.hpp). Before this, each of them left the other rank waiting in a
collective for ever. Expected values come from the command's documented exit codes
(`gridlu --help`) and from h5py reading the files, not from gridlu.
"""

import hashlib
import os
import sys
from pathlib import Path

import h5py
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from harness import Suite, random_matrix  # noqa: E402

suite = Suite(__doc__)

INPUT, OUTPUT = 3, 6  # exit codes, from `gridlu --help`
STOPPED = 5
LIMIT = 60  # seconds: a run still going by then is hung
N, BLOCK = 96, 16


def launch(parts, env=None):
    """An MPMD launch: `parts` is a list of (working directory, command) for one rank each.
    Killed with all its ranks (a session of its own) if it outlives LIMIT."""
    argv = [suite.mpiexec, "-q", "--oversubscribe"]
    for k, (wdir, command) in enumerate(parts):
        argv += ([":"] if k else []) + ["-n", "1", "--wdir", str(wdir), *map(str, command)]
    return suite.launch(argv, timeout=LIMIT, env=env)


def both(wdir, *args):
    """The same gridlu command on two ranks started in one directory."""
    return [(wdir, [suite.gridlu, *args])] * 2


def write_system(path):
    rng = np.random.default_rng(7)
    with h5py.File(path, "w") as f:
        f["A"] = random_matrix(rng, (N, N), np.float64)
        f["B"] = random_matrix(rng, (N, 1), np.float64)


def ended(c, run, code, mention):
    """One gridlu line, the code, well within the limit; what mpiexec -q adds is not ours."""
    line = c.failed_with(run, code, mention)
    c.check(run.seconds < LIMIT, f"took {run.seconds:.0f} s")
    return line


def no_output(c, path):
    c.check(not path.exists(), f"{path} was written by a failed run")


def digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


with suite.case("input visible on one rank only (ranks in different directories)") as c:
    seen, unseen = c.dir / "seen", c.dir / "unseen"
    seen.mkdir(), unseen.mkdir()
    write_system(seen / "in.h5")
    run = launch([(d, [suite.gridlu, "solve", "in.h5", "--out", "x.h5"]) for d in (seen, unseen)])
    ended(c, run, INPUT, r"cannot open .*unseen/in\.h5")
    no_output(c, seen / "x.h5")

with suite.case("a file the ranks see differently") as c:
    first, second = c.dir / "first", c.dir / "second"
    first.mkdir(), second.mkdir()
    write_system(first / "in.h5")
    with h5py.File(second / "in.h5", "w") as f:  # no A: rank 1 alone would fail to find it
        f["B"] = np.ones((N, 1))
    run = launch([(d, [suite.gridlu, "solve", "in.h5", "--out", "x.h5"]) for d in (first, second)])
    ended(c, run, INPUT, r"on rank 1 is not the file rank 0 reads")
    no_output(c, first / "x.h5")

# Under AddressSanitizer rank 1 runs without the address-space limit; the injected
# allocation failure is the same.
LIMIT_V = [] if suite.sanitized() else ["ulimit -v 4000000"]
with suite.case(f"out of memory on one rank ({', '.join(LIMIT_V + ['allocate@1'])})") as c:
    write_system(c.dir / "in.h5")
    # The limit leaves room to start (the up-front check of RLIMIT_AS passes); the
    # injected failure is the matrix allocation after it.
    command = [suite.gridlu, "solve", "in.h5", "--out", "x.h5"]
    limited = ["sh", "-c", " && ".join(LIMIT_V + ['exec "$@"']), "sh", *command]
    run = launch([(c.dir, command), (c.dir, limited)], env={"GRIDLU_FAULT": "allocate@1"})
    ended(c, run, OUTPUT, r"out of memory on rank 1$")
    no_output(c, c.dir / "x.h5")

with suite.case("write error on one rank while writing a checkpoint (write@1)") as c:
    write_system(c.dir / "in.h5")
    ckpt = c.dir / "ckpt"
    first = launch(both(c.dir, "solve", "in.h5", "--out", "x.h5", "--block", BLOCK,
                        "--checkpoint", ckpt, "--stop-after", "0.000001"))
    c.require(first.code == STOPPED and (ckpt / "checkpoint.h5").exists(),
              f"expected exit 5 with a checkpoint: {first.describe()}")
    before = digest(ckpt / "checkpoint.h5")
    run = launch(both(c.dir, "resume", ckpt, "--checkpoint-every", "0"),
                 env={"GRIDLU_FAULT": "write@1"})
    ended(c, run, OUTPUT, r"cannot write 'work' .*injected fault")
    c.check(digest(ckpt / "checkpoint.h5") == before, "the previous checkpoint changed")
    with h5py.File(ckpt / "checkpoint.h5", "r") as f:  # still a whole, readable state
        c.check(f["work"].shape == (N, N), f"checkpoint work is {f['work'].shape}")
    left = [e for e in os.listdir(ckpt) if e.startswith(".gridlu")]
    c.check(not left, f"staging left in the checkpoint directory: {left}")
    no_output(c, c.dir / "x.h5")

with suite.case("an input seen missing on one rank (open-input@1)") as c:
    write_system(c.dir / "in.h5")
    run = launch(both(c.dir, "solve", "in.h5", "--out", "x.h5"),
                 env={"GRIDLU_FAULT": "open-input@1"})
    ended(c, run, INPUT, r"cannot open .*in\.h5: injected fault")
    no_output(c, c.dir / "x.h5")

with suite.case("read error on one rank (read@1)") as c:
    write_system(c.dir / "in.h5")
    run = launch(both(c.dir, "solve", "in.h5", "--out", "x.h5", "--block", BLOCK),
                 env={"GRIDLU_FAULT": "read@1"})
    ended(c, run, INPUT, r"cannot read 'A' .*injected fault")
    no_output(c, c.dir / "x.h5")

with suite.case("failure inside the collective close on one rank (close@1)") as c:
    write_system(c.dir / "in.h5")
    run = launch(both(c.dir, "solve", "in.h5", "--out", "x.h5"), env={"GRIDLU_FAULT": "close@1"})
    ended(c, run, OUTPUT, r"cannot finish writing .*injected fault on rank 1$")
    no_output(c, c.dir / "x.h5")

suite.finish()
