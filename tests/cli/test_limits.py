"""Memory and size limits: commands too large for the ranks' memory are refused up front (exit
6, one line naming the need per rank), block sizes out of range are usage errors (exit 2), and
a rank limited by `ulimit -v` is refused together with the others, without a hang."""

import json
import os
import re
import sys
import time
from pathlib import Path

import h5py
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import harness  # noqa: E402
from harness import (conditioned_matrix, random_matrix, read_h5, reference_solution,  # noqa: E402
                     write_h5)

suite = harness.Suite(__doc__)
rng = np.random.default_rng(2207)
USAGE, RESOURCE = 2, 6  # exit codes of src/cli/main.cpp: usage, output or resource failure
PROMPT_SECONDS = 15     # a refusal comes before any large allocation: launch time only
NEED = re.compile(r"about ([0-9.]+) MB per rank needed \(matrices ([0-9.]+), panels ([0-9.]+) "
                  r"with block (\d+), I/O ([0-9.]+)")


def local_extent(n, nb, procs, p=0):
    """reference: the block-cyclic count recomputed in numpy: blocks of nb (the last one
    shorter) dealt round-robin to `procs` processes; process p's share of n indices."""
    starts = np.arange(0, n, nb)
    return int(np.minimum(nb, n - starts)[p::procs].sum())


def expected_need(n, nrhs, nb, grid, element_bytes, vectors, lookahead=None):
    """The documented model in bytes per rank: (matrices, panels) for the rank with the largest
    share, A and `vectors` n x nrhs matrices; the panels in flight, U block rows and the
    interchange messages when the command factors."""
    p, q = grid
    mr, nc = local_extent(n, nb, p), local_extent(n, nb, q)
    kc = local_extent(nrhs, nb, q)
    matrices = element_bytes * (mr * nc + vectors * mr * kc)
    if lookahead is None:
        return matrices, 0.0
    in_flight = min(lookahead + 1, -(-n // nb))
    panels = element_bytes * (in_flight * (mr + nb) * nb + 2 * nb * min(nc, 2048)
                              + 2 * min(2**17, 2 * nb * nc))
    return matrices, panels


def check_need(c, line, matrices, panels):
    """The need printed (in MB, one decimal) matches the model's arithmetic."""
    m = NEED.search(line)
    if not c.check(m, f"no need per rank in {line!r}"):
        return
    total, got_matrices, got_panels, io = (float(m.group(k)) for k in (1, 2, 3, 5))
    c.check(abs(got_matrices - matrices / 1e6) <= 0.051,
            f"matrices {got_matrices} MB, numpy's block-cyclic count gives {matrices / 1e6:.3f}")
    c.check(abs(got_panels - panels / 1e6) <= 0.051,
            f"panels {got_panels} MB, the model gives {panels / 1e6:.3f}")
    c.check(io > 0 and abs(total - (got_matrices + got_panels + io)) <= 0.2,
            f"total {total} MB is not matrices + panels + I/O ({got_matrices}, {got_panels}, {io})")


def refused_promptly(c, run, started, code, mention):
    line = c.failed_with(run, code, mention)
    c.check(time.monotonic() - started < PROMPT_SECONDS,
            f"took {time.monotonic() - started:.1f} s; a refusal should come at once")
    return line


def empty_system(path, n, dtype=np.float64):
    """A and B of order n in a file of a few kilobytes: chunked datasets with nothing
    written, so that only the memory a solve would take can refuse it."""
    with h5py.File(path, "w") as f:
        f.create_dataset("A", shape=(n, n), dtype=dtype, chunks=(64, 64))
        f.create_dataset("B", shape=(n,), dtype=dtype, chunks=(64,))


with suite.case("generate random --n 1000000 complex128: exit 6 at once, nothing written") as c:
    started = time.monotonic()
    run = suite.run("generate", "random", "--n", 1000000, "--type", "complex128",
                    "--out", c.dir / "g.h5")
    line = refused_promptly(c, run, started, RESOURCE, r"not enough memory")
    check_need(c, line, *expected_need(1000000, 1, 224, (1, 1), 16, vectors=1))
    c.check(os.listdir(c.dir) == [], f"left behind: {os.listdir(c.dir)}")

with suite.case("demo --n 200000 on 2 ranks: exit 6 at once, need from the 1x2 layout") as c:
    started = time.monotonic()
    run = suite.run("demo", "random", "--n", 200000, ranks=2)
    line = refused_promptly(c, run, started, RESOURCE, r"not enough memory.*ranks")
    check_need(c, line, *expected_need(200000, 4, 224, (1, 2), 8, vectors=3, lookahead=1))

with suite.case("bench --n 300000 on 2 ranks: exit 6 at once") as c:
    started = time.monotonic()
    run = suite.run("bench", "--n", 300000, ranks=2)
    line = refused_promptly(c, run, started, RESOURCE, r"not enough memory")
    check_need(c, line, *expected_need(300000, 1, 224, (1, 2), 8, vectors=3, lookahead=1))

with suite.case("solve n=3000 --block 2000 on 1x2 under --memory-per-rank 10M: exit 6, "
                "rank 0's share is 3000 x 2000, not n^2/2") as c:
    empty_system(c.dir / "big.h5", 3000)
    run = suite.run("solve", c.dir / "big.h5", "--out", c.dir / "x.h5", "--block", 2000,
                    "--memory-per-rank", "10M", ranks=2)
    line = c.failed_with(run, RESOURCE, r"10\.5 MB available per rank \(rank 0: --memory-per-rank")
    check_need(c, line, *expected_need(3000, 1, 2000, (1, 2), 8, vectors=3, lookahead=1))
    c.check(not (c.dir / "x.h5").exists(), "X was written")

# 4k: A's share alone, 40 x 20 x 8 bytes at any block on 1x2, is more.
with suite.case("tiny solve: --memory-per-rank 4k refuses it (exit 6), 1.5GiB accepts it") as c:
    a, b = conditioned_matrix(rng, 40, np.float64), random_matrix(rng, (40, 2), np.float64)
    write_h5(c.dir / "s.h5", {"A": a, "B": b})
    run = suite.run("solve", c.dir / "s.h5", "--out", c.dir / "x.h5", "--memory-per-rank",
                    "4k", ranks=2)
    c.failed_with(run, RESOURCE, r"not enough memory")
    c.check(not (c.dir / "x.h5").exists(), "X was written")
    run = suite.run("solve", c.dir / "s.h5", "--out", c.dir / "x.h5", "--memory-per-rank",
                    "1.5GiB", ranks=2)
    c.succeeded(run)
    x = read_h5(c.dir / "x.h5", "X")
    # reference: numpy.linalg.solve
    c.check(harness.rel_diff(x, reference_solution(a, b)) <= harness.rel_tol(a),
            "X differs from numpy.linalg.solve")

with suite.case("generate under --memory-per-rank 1M: exit 6 before anything is written") as c:
    out = c.dir / "out"
    out.mkdir()
    run = suite.run("generate", "random", "--n", 2000, "--out", out / "g.h5",
                    "--memory-per-rank", "1M", ranks=2)
    line = c.failed_with(run, RESOURCE, r"not enough memory")
    check_need(c, line, *expected_need(2000, 1, 224, (1, 2), 8, vectors=1))
    c.check(os.listdir(out) == [], f"left behind: {os.listdir(out)}")

for options, mention in ((["--block", 1000000000], r"between 1 and the order 100"),
                         (["--block", 0], r"at least 1"),
                         (["--memory-per-rank", "12X"], r"not a memory size")):
    with suite.case(f"demo --n 100 {' '.join(map(str, options))}: exit 2") as c:
        c.failed_with(suite.run("demo", "random", "--n", 100, *options), USAGE, mention)

with suite.case("solve --block 5000 of an order-3000 system: exit 2") as c:
    empty_system(c.dir / "big.h5", 3000)
    run = suite.run("solve", c.dir / "big.h5", "--out", c.dir / "x.h5", "--block", 5000)
    c.failed_with(run, USAGE, r"between 1 and the order 3000")


def mpmd(first, second, cwd):
    """Two ranks, each with its own command line; killed with its ranks after 60 s."""
    argv = [suite.mpiexec, "-q", "--oversubscribe", "-n", "1", *first, ":", "-n", "1", *second]
    return suite.launch(argv, cwd=cwd, timeout=60)


# Rank 1's share of A alone is 13000 x 6500 x 8 bytes = 676 MB, beyond 600000 kB of address
# space whatever the MPI library itself takes. Under AddressSanitizer (no ulimit -v possible)
# rank 1 alone is given --memory-per-rank instead: the same refusal by one rank, agreed.
LIMITED = "--memory-per-rank" if suite.sanitized() else "ulimit -v"
with suite.case(f"solve n=13000 on 2 ranks, rank 1 alone under {LIMITED}: both refuse (exit 6), "
                "no hang") as c:
    empty_system(c.dir / "big.h5", 13000)
    args = [suite.gridlu, "solve", str(c.dir / "big.h5"), "--out", str(c.dir / "x.h5")]
    if LIMITED == "ulimit -v":
        second, mention = ["sh", "-c", f"ulimit -v 600000; exec {' '.join(args)}"], \
            r"rank 1: its address-space limit \(ulimit -v\)"
    else:
        second, mention = [*args, "--memory-per-rank", "600M"], r"rank 1: --memory-per-rank"
    run = mpmd(args, second, c.dir)
    c.failed_with(run, RESOURCE, mention)
    c.check(run.seconds < 60, "took a minute or more")
    c.check(not (c.dir / "x.h5").exists(), "X was written")

def io_need(n, nb, grid, element_bytes, limit=2**28):
    """The documented bound of io_buffer_bytes (include/gridlu/io.hpp) for an n x n matrix,
    recomputed here: stripes of h rows shared by the ranks of a process row (or column)."""
    def direction(sharers):
        h = min(nb, n, max(1, limit * sharers // (n * element_bytes)))
        whole = -(-h // sharers) * n
        if sharers == 1:
            return element_bytes * whole
        return element_bytes * (2 * whole + h * local_extent(n, nb, sharers))
    return max(direction(grid[1]), direction(grid[0]))


def sanitizer_factor():
    """ASan keeps one shadow byte per eight and pads every allocation (its documented
    design); a release build is held to the model itself."""
    return 1.25 if suite.sanitized() else 1.0


# Without it ASan holds freed memory back from reuse, which a release build does not.
NO_QUARANTINE = {"ASAN_OPTIONS": "detect_leaks=0:quarantine_size_mb=0"}


with suite.case("peak memory per rank on 1x4, 4x1 and 2x2 within the stated model") as c:
    n, nb = 2450, 100  # 24.5 blocks: process row and column 0 hold the most
    harness.write_h5(c.dir / "big.h5", {"A": random_matrix(rng, (n, n), np.float64) + n * np.eye(n),
                                        "B": random_matrix(rng, (n,), np.float64)})
    harness.write_h5(c.dir / "small.h5", {"A": np.eye(16), "B": np.ones(16)})
    for p, q in ((1, 4), (4, 1), (2, 2)):
        peak = {}
        for name, block in (("small", 8), ("big", nb)):
            report = c.dir / f"{name}-{p}x{q}.json"
            c.succeeded(suite.run("solve", c.dir / f"{name}.h5", "--out", c.dir / f"{name}-{p}x{q}.h5",
                                  "--grid", f"{p}x{q}", "--block", block, "--report", report,
                                  "--quiet", ranks=4, env=NO_QUARANTINE))
            peak[name] = json.loads(report.read_text())["peak_resident_bytes_rank0"]
        # Rank 0 holds the largest share; the small run's peak is the libraries' own.
        matrices, panels = expected_need(n, 1, nb, (p, q), 8, 3, lookahead=1)
        model = matrices + panels + io_need(n, nb, (p, q), 8)
        share = 8 * local_extent(n, nb, p) * local_extent(n, nb, q)
        grown = peak["big"] - peak["small"]
        print(f"     {p}x{q}: grown {grown / 1e6:.1f} MB, model {model / 1e6:.1f} MB, "
              f"A's share {share / 1e6:.1f} MB")
        c.check(share <= grown <= model * sanitizer_factor() + 2**21,
                f"{p}x{q}: rank 0 grew by {grown / 1e6:.1f} MB; model {model / 1e6:.1f} MB, "
                f"A's share {share / 1e6:.1f} MB")

suite.finish()
