"""gridlu resume on checkpoints it must not trust (missing, truncated, one byte flipped, of
another kind, made from an input that has changed since): exit 3, one error line, no X. Resume
of a finished solve: says so and writes nothing. gridlu info on a stopped checkpoint: its
progress and restarts."""

import json
import os
import re
import shutil
import sys
from pathlib import Path

import h5py

sys.path.insert(0, str(Path(__file__).resolve().parent))
from checkpoint_support import (BLOCK, EVERY, NO_DATA, RANKS, System, harness,  # noqa: E402
                                interrupt, read_h5, rel_diff, sound_checkpoint)

suite = harness.Suite(__doc__)
system = System(suite, seed=7307)


def stopped_solve(c, source=system.path):
    """A solve of SOURCE stopped by SIGTERM after its first periodic checkpoint: the checkpoint
    directory and the X it will write once finished."""
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    interrupt(suite, c, ["solve", source, "--out", out, "--block", BLOCK, "--checkpoint", ckpt,
                         "--checkpoint-every", EVERY], RANKS, ckpt)
    return ckpt, out


def expect_refusal(c, ckpt, out):
    c.failed_with(suite.run("resume", ckpt, ranks=RANKS), NO_DATA)
    c.check(not out.exists(), f"resume wrote {out}")


def flip_byte(path, name):
    """XOR the lowest bit of the first byte of the middle element of dataset `name` as stored
    (little-endian: a change of one unit in the last place, or of one in an integer, that
    nothing but a checksum can notice)."""
    with h5py.File(path, "r") as f:
        d = f[name]
        if d.chunks is None:
            start, size = d.id.get_offset(), d.id.get_storage_size()
        else:
            chunk = d.id.get_chunk_info(0)
            start, size = chunk.byte_offset, chunk.size
        itemsize = d.dtype.itemsize
    where = start + size // 2 // itemsize * itemsize
    with open(path, "r+b") as f:
        f.seek(where)
        byte = f.read(1)[0]
        f.seek(where)
        f.write(bytes([byte ^ 1]))


def snapshot(directory):
    """{path: (size, modification time)} of every file under `directory`."""
    return {p: (p.stat().st_size, p.stat().st_mtime_ns) for p in directory.rglob("*")
            if p.is_file()}


with suite.case("directory without a job: exit 3, no X") as c:
    (c.dir / "ckpt").mkdir()
    expect_refusal(c, c.dir / "ckpt", c.dir / "x.h5")
    # Only the lock a run holds on the directory while it looks.
    left = sorted(os.listdir(c.dir / "ckpt"))
    c.check(left in ([], ["lock"]), f"resume wrote {left}")

with suite.case("checkpoint.h5 truncated to half: exit 3, no X") as c:
    ckpt, out = stopped_solve(c)
    path = ckpt / "checkpoint.h5"
    os.truncate(path, path.stat().st_size // 2)
    expect_refusal(c, ckpt, out)

for dataset in ("work", "pivots"):
    with suite.case(f"one byte flipped in the {dataset} data: exit 3, no X") as c:
        ckpt, out = stopped_solve(c)
        c.require(sound_checkpoint(c, ckpt, system.a)["k"] > 0, "no column done to damage")
        flip_byte(ckpt / "checkpoint.h5", dataset)
        expect_refusal(c, ckpt, out)

with suite.case("gridlu_kind changed to factors: exit 3, no X") as c:
    ckpt, out = stopped_solve(c)
    with h5py.File(ckpt / "checkpoint.h5", "r+") as f:
        f.attrs.modify("gridlu_kind", "factors")  # keeps the attribute's type
    expect_refusal(c, ckpt, out)

with suite.case("A rewritten with one entry changed after the checkpoint: exit 3, no X") as c:
    source = c.dir / "input.h5"
    shutil.copy(system.path, source)
    ckpt, out = stopped_solve(c, source)
    a = system.a.copy()
    a[17, system.n - 5] += 0.5
    harness.write_h5(source, {"A": a, "B": system.b})
    expect_refusal(c, ckpt, out)

with suite.case("resume of a finished solve: says complete, exit 0, writes nothing") as c:
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    c.succeeded(suite.run(*system.solve_args(out, "--checkpoint", ckpt), ranks=RANKS))
    c.require((ckpt / "complete.json").exists(), "no complete.json after the solve")
    before, content = snapshot(c.dir), out.read_bytes()
    run = suite.run("resume", ckpt, ranks=RANKS)
    c.succeeded(run)
    c.check(re.search("complete", run.stdout, re.IGNORECASE),
            f"stdout does not say the solve is complete:\n{run.stdout}")
    c.check(out.read_bytes() == content, "X was rewritten")
    after = snapshot(c.dir)
    c.check(after == before, f"files changed: {sorted(set(after.items()) ^ set(before.items()))}")

with suite.case("a job recorded before solve_with, refine, require_digits, precision and "
                "fallback existed resumes as A X = B in double") as c:
    ckpt, out = stopped_solve(c)
    record = json.loads((ckpt / "job.json").read_text())
    for key in ("solve_with", "refine", "require_digits", "precision", "fallback"):
        c.require(record.pop(key, None) is not None, f"job.json lacks {key}")
    (ckpt / "job.json").write_text(json.dumps(record, indent=2) + "\n")
    c.succeeded(suite.run("resume", ckpt, ranks=RANKS))
    c.require(out.exists(), "resume wrote no X")
    # reference: numpy.linalg.solve; COND = 10, so X is good to about 14 digits
    err = rel_diff(read_h5(out, "X"), system.x_numpy)
    c.check(err <= 1e-10, f"||X - X_numpy|| / ||X_numpy|| = {err:.1e}")

with suite.case("gridlu info on a checkpoint stopped again after a resume") as c:
    ckpt, _ = stopped_solve(c)
    interrupt(suite, c, ["resume", ckpt, "--checkpoint-every", EVERY], RANKS, ckpt)
    cp = sound_checkpoint(c, ckpt, system.a)
    run = suite.run("info", ckpt)
    c.succeeded(run)
    shown = run.stdout
    n = system.n
    c.check(re.search(rf"\b{cp['k']} of {n}\b", shown),
            f"no '{cp['k']} of {n}' (columns_done of n) in:\n{shown}")
    # reference: LU's flop count to leading order, 2/3 n^3, of which 2/3 (n - k)^3 remain
    percent = 100 * (1 - (1 - cp["k"] / n) ** 3)
    figures = [float(v) for v in re.findall(r"(\d+(?:\.\d+)?)\s*%", shown)]
    c.check(any(abs(v - percent) <= 1 for v in figures),
            f"no percentage within 1 of {percent:.1f} % of the flops in:\n{shown}")
    # reference: the elapsed_seconds attribute, in seconds, within the rounding of what is shown
    seconds = [float(v) for v in re.findall(r"(\d+(?:\.\d+)?)\s*s\b", shown)]
    c.check(any(abs(v - cp["elapsed"]) <= max(0.05 * cp["elapsed"], 0.01) for v in seconds),
            f"no time within 5 % of {cp['elapsed']:.3f} s in:\n{shown}")
    m = re.search(r"restarts?\D{0,20}?(\d+)", shown, re.IGNORECASE)
    c.check(m and int(m.group(1)) == cp["restarts"] >= 1,
            f"restarts attribute {cp['restarts']} (one resume so far) not shown in:\n{shown}")

suite.finish()
