"""gridlu solve / generate against numpy: h5py writes the inputs and reads the outputs back,
numpy.linalg.solve gives the answer gridlu's X is held to."""

import json
import math
import re
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import harness  # noqa: E402
from harness import (backward_error, conditioned_matrix, eps, random_matrix, read_h5,  # noqa: E402
                     reference_solution, rel_diff, rel_tol, write_h5)

suite = harness.Suite(__doc__)
rng = np.random.default_rng(20240611)  # fixed, so that a failure can be reproduced


def auto_grid(n, dtype, ranks, block):
    """The default shape: the grid `gridlu plan` predicts fastest for this order, type, rank
    count and block."""
    run = suite.run("plan", "--json", "--n", n, "--type", dtype.name, "--nodes", 1,
                    "--cores-per-node", ranks, "--mem-per-node", 64, "--block", block)
    return json.loads(run.stdout)["grid"] if run.code == 0 else run.describe()


def check_x(c, path, a, b):
    """X read back with h5py: B's shape, A's type, close to numpy's answer and a small
    backward error; returns X."""
    x = read_h5(path, "X")
    c.require(x.shape == b.shape, f"X has shape {x.shape}, B has {b.shape}")
    c.check(x.dtype == a.dtype, f"X is {x.dtype}, A is {a.dtype}")
    err, tol = rel_diff(x, reference_solution(a, b)), rel_tol(a)
    # reference: numpy.linalg.solve
    c.check(err <= tol, f"||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > {tol:.2e}")
    # 10 n eps: the usual acceptance level for LU with partial pivoting (common practice)
    berr, limit = backward_error(a, x, b), 10 * a.shape[0] * eps(a.dtype)
    c.check(berr <= limit, f"backward error of X (numpy) {berr:.2e} > 10 n eps = {limit:.2e}")
    return x


def check_report(c, path, a, b, ranks, grid, block):
    r = json.loads(Path(path).read_text())
    n = a.shape[0]
    c.check(r.get("n") == n, f"report n = {r.get('n')}, expected {n}")
    nrhs = 1 if b.ndim == 1 else b.shape[1]
    c.check(r.get("nrhs") == nrhs, f"report nrhs = {r.get('nrhs')}, expected {nrhs}")
    c.check(r.get("type") == a.dtype.name, f"report type = {r.get('type')}, A is {a.dtype}")
    shape = [int(v) for v in grid.split("x")] if grid else auto_grid(n, a.dtype, ranks, r["block"])
    c.check(r.get("grid") == shape, f"report grid = {r.get('grid')}, expected {shape}")
    c.check(r.get("ranks") == ranks, f"report ranks = {r.get('ranks')}, expected {ranks}")
    if block is None:
        c.check(isinstance(r.get("block"), int) and r["block"] > 0, f"block = {r.get('block')}")
    else:
        c.check(r.get("block") == block, f"report block = {r.get('block')}, expected {block}")
    times = r.get("times", {})
    phases = ["read", "factor", "solve", "write", "total"]
    if c.check(all(isinstance(times.get(k), (int, float)) and times[k] >= 0 for k in phases),
               f"times should hold non-negative {phases}: {times}"):
        c.check(times["total"] >= max(times[k] for k in phases[:-1]),
                f"total time below one of its phases: {times}")
    g = r.get("gflops")
    c.check(isinstance(g, (int, float)) and math.isfinite(g) and g > 0, f"gflops = {g}")
    berr, limit = r.get("normwise_backward_error"), 10 * n * eps(a.dtype)
    # 10 n eps, as above (common practice)
    c.check(isinstance(berr, (int, float)) and 0 <= berr <= limit,
            f"report normwise_backward_error = {berr}, expected at most 10 n eps = {limit:.2e}")
    # These systems are well conditioned (harness.conditioned_matrix): some digits, no flag.
    digits, flags = r.get("trusted_digits"), r.get("flags")
    c.check(isinstance(digits, int) and digits >= 1 and flags == [],
            f"a well-conditioned system: trusted_digits = {digits}, flags = {flags}")
    c.check(r.get("status") == "solved", f"report status = {r.get('status')}")
    c.check(isinstance(r.get("version"), str) and re.match(r"\d+\.\d+", r["version"]),
            f"report version = {r.get('version')}")


def solve_case(n, dtype, nrhs, ranks, grid=None, block=None, column_major=False):
    """A random system written by h5py, solved by gridlu, checked against numpy."""
    shape = "1-D B" if nrhs is None else f"B n x {nrhs}"
    name = (f"{np.dtype(dtype).name}{' column-major' if column_major else ''} n={n} "
            f"block {block or 'default'}, {shape}, {ranks} rank(s), grid {grid or 'auto'}")
    with suite.case(name) as c:
        a = conditioned_matrix(rng, n, dtype)
        b = random_matrix(rng, (n,) if nrhs is None else (n, nrhs), dtype)
        system, out, report = c.dir / "system.h5", c.dir / "x.h5", c.dir / "report.json"
        # --column-major: element [i][j] of the dataset is A(j, i), so the file holds A.T
        write_h5(system, {"A": a.T if column_major else a, "B": b})
        args = ["solve", system, "--out", out, "--report", report]
        args += ["--grid", grid] if grid else []
        args += ["--block", block] if block else []
        args += ["--column-major"] if column_major else []
        c.succeeded(suite.run(*args, ranks=ranks))
        check_x(c, out, a, b)
        check_report(c, report, a, b, ranks, grid, block)


# N = 150 is not a multiple of 16, nor 97 of the default block: ragged last blocks.
solve_case(150, np.float64, None, 1, block=16)
solve_case(150, np.float64, 3, 2, block=16)
solve_case(97, np.float64, None, 4, grid="2x2")
solve_case(97, np.complex128, 3, 4, grid="1x4")
solve_case(150, np.complex128, None, 2, grid="2x1", block=16)
solve_case(150, np.float32, 3, 2, grid="1x2", block=16)
solve_case(97, np.float32, None, 1)
solve_case(97, np.complex64, None, 4, grid="4x1")
solve_case(150, np.complex64, 3, 2, block=16)
solve_case(150, np.float64, 3, 2, block=16, column_major=True)
# Complex: a transpose taken as the conjugate transpose would show here.
solve_case(97, np.complex128, None, 4, column_major=True)
solve_case(120, np.complex64, 3, 1, block=32, column_major=True)

with suite.case("B in another file (--rhs-file), float64 n=120, B n x 3, 2 ranks") as c:
    a, b = conditioned_matrix(rng, 120, np.float64), random_matrix(rng, (120, 3), np.float64)
    # The matrix file holds a decoy B that must not be used.
    write_h5(c.dir / "matrix.h5", {"A": a, "B": random_matrix(rng, (120, 3), np.float64)})
    write_h5(c.dir / "rhs.h5", {"B": b})
    c.succeeded(suite.run("solve", c.dir / "matrix.h5", "--rhs-file", c.dir / "rhs.h5",
                          "--out", c.dir / "x.h5", ranks=2))
    check_x(c, c.dir / "x.h5", a, b)

with suite.case("dataset names in groups (--matrix-dataset, --rhs-dataset), 2 ranks") as c:
    # A charged plate cut into 110 panels: coupling of panel charges to panel potentials,
    # and two sets of prescribed potentials.
    a = conditioned_matrix(rng, 110, np.complex128)
    b = random_matrix(rng, (110, 2), np.complex128)
    write_h5(c.dir / "plate.h5", {"plate/coupling": a, "plate/potentials": b})
    c.succeeded(suite.run("solve", c.dir / "plate.h5", "--matrix-dataset", "plate/coupling",
                          "--rhs-dataset", "plate/potentials", "--out", c.dir / "x.h5", ranks=2))
    check_x(c, c.dir / "x.h5", a, b)

with suite.case("--save-factors, then --factors with new right-hand sides, 2 ranks") as c:
    n = 130
    a = conditioned_matrix(rng, n, np.float64)
    b_first, b_new = random_matrix(rng, n, np.float64), random_matrix(rng, (n, 3), np.float64)
    write_h5(c.dir / "system.h5", {"A": a, "B": b_first})
    write_h5(c.dir / "new_rhs.h5", {"B": b_new})
    factors = c.dir / "factors.h5"
    c.succeeded(suite.run("solve", c.dir / "system.h5", "--out", c.dir / "x_first.h5",
                          "--save-factors", factors, ranks=2))
    check_x(c, c.dir / "x_first.h5", a, b_first)
    c.succeeded(suite.run("solve", c.dir / "system.h5", "--rhs-file", c.dir / "new_rhs.h5",
                          "--factors", factors, "--out", c.dir / "x_reused.h5", ranks=2))
    x_reused = check_x(c, c.dir / "x_reused.h5", a, b_new)
    c.succeeded(suite.run("solve", c.dir / "system.h5", "--rhs-file", c.dir / "new_rhs.h5",
                          "--out", c.dir / "x_fresh.h5", ranks=2))
    x_fresh = read_h5(c.dir / "x_fresh.h5", "X")
    # Same factors, same substitutions: only the order of a few sums may differ.
    d = rel_diff(x_reused, x_fresh)
    c.check(d <= 1e-12, f"X from saved factors differs from a fresh solve by {d:.2e} > 1e-12")


def generate_case(dtype, n, nrhs):
    with suite.case(f"generate random {dtype} n={n} --rhs {nrhs}: 1 and 2 ranks agree") as c:
        args = ["generate", "random", "--n", n, "--rhs", nrhs, "--type", dtype, "--seed", 7]
        for ranks in (1, 2):
            c.succeeded(suite.run(*args, "--out", c.dir / f"g{ranks}.h5", ranks=ranks))
        a1, b1 = read_h5(c.dir / "g1.h5", "A"), read_h5(c.dir / "g1.h5", "B")
        a2, b2 = read_h5(c.dir / "g2.h5", "A"), read_h5(c.dir / "g2.h5", "B")
        c.require(a1.shape == (n, n) and b1.shape == (n, nrhs),
                  f"A {a1.shape}, B {b1.shape}; expected ({n}, {n}), ({n}, {nrhs})")
        c.check(a1.dtype == np.dtype(dtype) and b1.dtype == np.dtype(dtype),
                f"A is {a1.dtype}, B is {b1.dtype}; expected {dtype}")
        c.check(a1.tobytes() == a2.tobytes(), "A differs between 1 and 2 ranks")
        c.check(b1.tobytes() == b2.tobytes(), "B differs between 1 and 2 ranks")
        c.check(np.unique(a1).size > n, "A does not look random")
        if np.iscomplexobj(a1):
            c.check(np.count_nonzero(a1.imag) > n, "A has (almost) no imaginary part")
        c.succeeded(suite.run("solve", c.dir / "g2.h5", "--out", c.dir / "x.h5", ranks=2))
        check_x(c, c.dir / "x.h5", a1, b1)


generate_case("float64", 150, 2)
generate_case("complex64", 97, 3)

with suite.case("generate random: the seed matters, B is n x 1 without --rhs") as c:
    for seed in (1, 2):
        c.succeeded(suite.run("generate", "random", "--n", 80, "--seed", seed,
                              "--out", c.dir / f"s{seed}.h5", ranks=2))
    a1, a2 = read_h5(c.dir / "s1.h5", "A"), read_h5(c.dir / "s2.h5", "A")
    c.check(not np.array_equal(a1, a2), "seeds 1 and 2 give the same A")
    b = read_h5(c.dir / "s1.h5", "B")
    c.require(b.shape == (80, 1), f"B has shape {b.shape}, expected (80, 1)")
    c.succeeded(suite.run("solve", c.dir / "s1.h5", "--out", c.dir / "x.h5", ranks=1))
    check_x(c, c.dir / "x.h5", a1, b)

suite.finish()
