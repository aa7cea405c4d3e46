"""gridlu solve on 8 and 9 ranks (grids 2x4, 4x2, 1x8, 8x1, 3x3; oversubscribed: for
correctness only), order and block sizes that do not divide each other, checked against
numpy.linalg.solve through h5py. Each grid also runs with the transfer limit lowered to a
few hundred bytes, so every MPI message and HDF5 read or write goes in pieces (inputs,
checkpoints, saved factors, X): its X and factors must be bit for bit those of the run
without the limit."""

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import harness  # noqa: E402
from harness import read_h5, reference_solution, rel_diff, rel_tol, write_h5  # noqa: E402

suite = harness.Suite(__doc__)
# A float64 row of the order below is 808 bytes: the limit splits single rows as well.
LOW_LIMIT = {"GRIDLU_TRANSFER_LIMIT": "200"}
CASES = [  # ranks, grid, order, block, element type
    (8, "2x4", 101, 8, np.float64),
    (8, "4x2", 101, 8, np.complex128),
    (8, "1x8", 75, 4, np.float64),
    (8, "8x1", 75, 4, np.complex128),
    (9, "3x3", 101, 7, np.float64),
]


def system(rng, n, dtype):
    a = rng.standard_normal((n, n)) + n * np.eye(n)
    b = rng.standard_normal((n, 3))
    if dtype == np.complex128:
        a = a + 1j * rng.standard_normal((n, n))
        b = b + 1j * rng.standard_normal((n, 3))
    return a.astype(dtype), b.astype(dtype)


def solve(c, ranks, grid, block, name, env=None):
    run = suite.run("solve", c.dir / "in.h5", "--out", c.dir / f"{name}-x.h5", "--grid", grid,
                    "--block", block, "--save-factors", c.dir / f"{name}-lu.h5",
                    "--checkpoint", c.dir / f"{name}-ck", "--checkpoint-every", "0.00001",
                    "--quiet", ranks=ranks, env=env)
    c.succeeded(run)
    return read_h5(c.dir / f"{name}-x.h5", "X")


for ranks, grid, n, block, dtype in CASES:
    with suite.case(f"{ranks} ranks, grid {grid}, n={n}, block {block}, {dtype.__name__}") as c:
        a, b = system(np.random.default_rng(n + ranks), n, dtype)
        write_h5(c.dir / "in.h5", {"A": a, "B": b})
        x = solve(c, ranks, grid, block, "whole")
        c.check(rel_diff(x, reference_solution(a, b)) <= rel_tol(a),
                f"X differs from numpy by {rel_diff(x, reference_solution(a, b)):.2e}")
        split = solve(c, ranks, grid, block, "split", env=LOW_LIMIT)
        c.check(np.array_equal(split, x), "X with the lowered transfer limit differs")
        for key in ("LU", "pivots"):
            whole, pieces = read_h5(c.dir / "whole-lu.h5", key), read_h5(c.dir / "split-lu.h5", key)
            c.check(np.array_equal(whole, pieces), f"saved {key} differ with the lowered limit")

suite.finish()
