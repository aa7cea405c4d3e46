"""gridlu generate KIND for the classical test matrices (wilkinson, hilbert, frank,
second-difference), held to closed forms built by numpy; their solves are checked through
the factors gridlu saves (growth, determinant) and X, read back with h5py.

Only exit codes and HDF5 files are used from a solve: its printed lines are not part of
what is checked here."""

import math
import sys
from fractions import Fraction
from pathlib import Path

import h5py
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import harness  # noqa: E402
from harness import eps, read_h5, rel_diff, rel_tol  # noqa: E402

suite = harness.Suite(__doc__)
USAGE = 2


def closed_form(kind, n, real=np.float64):
    """The matrix as published, built by numpy in the real type `real` (0-based i, j)."""
    i, j = np.indices((n, n))
    if kind == "wilkinson":
        # 1 on the diagonal, -1 below it, 1 in the last column (Wilkinson 1961; Higham,
        # Accuracy and Stability of Numerical Algorithms, 2nd ed. 2002, §9.4)
        return np.where((j == n - 1) | (i == j), 1, np.where(i > j, -1, 0)).astype(real)
    if kind == "hilbert":
        # h_ij = 1/(i+j+1) (Choi 1983, Amer. Math. Monthly 90)
        # (the quotient rounded in the type's own precision, as IEEE division does)
        return real(1) / (i + j + 1).astype(real)
    if kind == "frank":
        # n - max(i, j) for j >= i-1, 0 below the subdiagonal (Frank 1958; Higham's Test
        # Matrix Toolbox)
        return np.where(j >= i - 1, n - np.maximum(i, j), 0).astype(real)
    # 2 on the diagonal, -1 on its neighbours (the second-difference matrix, recalled from
    # memory)
    return (2 * np.eye(n) - np.eye(n, k=1) - np.eye(n, k=-1)).astype(real)


def attributes(path):
    with h5py.File(path, "r") as f:
        return {k: (v.decode() if isinstance(v, bytes) else v) for k, v in f.attrs.items()}


def generate(c, kind, n, out, ranks=1, grid=None, dtype=None):
    args = ["generate", kind, "--n", n, "--out", out]
    args += ["--grid", grid] if grid else []
    args += ["--type", dtype] if dtype else []
    c.succeeded(suite.run(*args, ranks=ranks))


def check_system(c, kind, n, path, dtype):
    """A equals the closed form in `dtype` (real entries), B = A @ ones to a few ulps, and
    the attributes say what the file is. Returns A and B."""
    a, b = read_h5(path, "A"), read_h5(path, "B")
    c.require(a.shape == (n, n) and b.shape == (n, 1),
              f"A {a.shape}, B {b.shape}; expected ({n}, {n}), ({n}, 1)")
    c.check(a.dtype == dtype and b.dtype == dtype, f"A is {a.dtype}, B is {b.dtype}, not {dtype}")
    c.check(not np.iscomplexobj(a) or not np.any(a.imag) and not np.any(b.imag),
            "a complex type got entries with an imaginary part")
    real = np.finfo(dtype).dtype.type
    want = closed_form(kind, n, real)
    if kind == "hilbert":
        c.check(np.allclose(a.real, want, rtol=1e-15 if real is np.float64 else 0, atol=0),
                f"A differs from 1/(i+j+1) by up to {np.abs(a.real - want).max():.2e}")
    else:
        # integer-valued: exact in every type
        c.check(np.array_equal(a.real, want),
                f"A differs from the closed form in {np.count_nonzero(a.real != want)} entries")
    # The row sums of the stored A, correctly rounded (math.fsum), then in B's precision.
    ref = np.array([math.fsum(row) for row in a.real.astype(np.float64)]).astype(real)
    off = np.abs(b.real[:, 0] - ref)
    ulps = np.spacing(np.abs(ref))
    c.check(np.all(off <= 2 * ulps), f"B differs from A @ ones by more than 2 ulps in "
            f"{np.count_nonzero(off > 2 * ulps)} rows, by up to {off.max():.2e}")
    attrs = attributes(path)
    for key, value in (("generator", kind), ("solution", "ones"), ("n", n), ("nrhs", 1),
                       ("type", np.dtype(dtype).name)):
        c.check(attrs.get(key) == value, f"attribute {key} = {attrs.get(key)!r}, not {value!r}")
    return a, b


# n = 300: more than gridlu's default block (224) and not a multiple of it, so the blocks
# of A and B are written by several ranks on the larger grids.
for kind in ("wilkinson", "hilbert", "frank", "second-difference"):
    with suite.case(f"generate {kind} n=300 float64: closed form, B = A @ ones, same file "
                    "on 1, 2 and 4 ranks") as c:
        runs = ((1, None), (2, "2x1"), (4, "2x2")) if kind in ("wilkinson", "frank") else \
            ((1, None), (2, "1x2"), (4, "2x2"))
        for ranks, grid in runs:
            generate(c, kind, 300, c.dir / f"g{ranks}.h5", ranks, grid)
        a, b = check_system(c, kind, 300, c.dir / "g1.h5", np.float64)
        for ranks, grid in runs[1:]:
            path = c.dir / f"g{ranks}.h5"
            c.check(read_h5(path, "A").tobytes() == a.tobytes(), f"A differs on grid {grid}")
            c.check(read_h5(path, "B").tobytes() == b.tobytes(), f"B differs on grid {grid}")
            c.check(attributes(path) == attributes(c.dir / "g1.h5"),
                    f"attributes differ on grid {grid}")

# The other types: complex types get the same real entries; float32 rounds 1/(i+j+1) itself.
for kind, dtype, ranks, grid in (("hilbert", np.float32, 2, "2x1"),
                                 ("hilbert", np.complex128, 1, None),
                                 ("wilkinson", np.complex64, 4, "1x4"),
                                 ("frank", np.float32, 2, "1x2")):
    with suite.case(f"generate {kind} n=37 {np.dtype(dtype).name}, {ranks} rank(s)") as c:
        generate(c, kind, 37, c.dir / "g.h5", ranks, grid, np.dtype(dtype).name)
        check_system(c, kind, 37, c.dir / "g.h5", dtype)


def solve(c, system, ranks, grid, block):
    """gridlu solve with --save-factors; returns (X, L, U, pivots). The factors must be
    those of A: P A = L U, with P the interchanges of `pivots` in order."""
    x, lu = c.dir / f"x{ranks}.h5", c.dir / f"lu{ranks}.h5"
    args = ["solve", system, "--out", x, "--save-factors", lu, "--block", block]
    args += ["--grid", grid] if grid else []
    run = suite.run(*args, ranks=ranks)
    c.require(not run.hung and run.code == 0, f"expected exit 0: {run.describe()}")
    packed, pivots = read_h5(lu, "LU"), read_h5(lu, "pivots")
    n = packed.shape[0]
    lower, upper = np.tril(packed, -1) + np.eye(n), np.triu(packed)
    pa = read_h5(system, "A").copy()
    for i, p in enumerate(pivots):
        pa[[i, p]] = pa[[p, i]]
    # LU with partial pivoting: P A = L U up to about n u |L| |U| (Higham 2002, ch. 9)
    resid = np.abs(pa - lower @ upper).max()
    bound = n * eps(np.float64) * (np.abs(lower) @ np.abs(upper)).max()
    c.check(resid <= bound, f"{ranks} rank(s): |P A - L U| = {resid:.2e} > {bound:.2e}")
    return read_h5(x, "X"), lower, upper, pivots


def determinant(upper, pivots):
    """det A = det P det U: each interchange (pivots[i] != i) flips the sign."""
    swaps = int(np.count_nonzero(pivots != np.arange(len(pivots))))
    return float(np.prod(np.diag(upper))) * (-1) ** swaps


with suite.case("wilkinson n=40: growth max|U| / max|A| is exactly 2**39 on 1, 2, 4 ranks") as c:
    generate(c, "wilkinson", 40, c.dir / "w.h5")
    a = read_h5(c.dir / "w.h5", "A")
    for ranks, grid in ((1, None), (2, "2x1"), (4, "2x2")):
        _, _, upper, _ = solve(c, c.dir / "w.h5", ranks, grid, 16)
        growth = np.abs(upper).max() / np.abs(a).max()
        # growth factor 2^(n-1) under partial pivoting (Wilkinson 1961; Higham 2002, §9.4)
        c.check(growth == 2.0 ** 39, f"{ranks} rank(s): growth {growth!r}, expected 2**39")

with suite.case("frank n=12: determinant 1 from the saved factors, 1 and 4 ranks") as c:
    # Frank's matrix has determinant 1 (Frank 1958; Higham's Test Matrix Toolbox), but its
    # condition number grows fast: kappa_2(F_12) = 4.3e9 (numpy.linalg.cond), so kappa u =
    # 4.7e-7 (u = 2**-53) is below the 1e-6 allowed, while kappa u = 1e-4 for n = 14 and an
    # LU with partial pivoting in float64 gives det about 13 for n = 20 (measured). n = 12
    # is the largest order where 1e-6 is a fair demand; a lost sign still gives -1.
    generate(c, "frank", 12, c.dir / "f.h5")
    # --block 5: the 12 columns span three blocks, shared by the ranks of a 2x2 grid.
    for ranks, grid in ((1, None), (4, "2x2")):
        _, _, upper, pivots = solve(c, c.dir / "f.h5", ranks, grid, 5)
        det = determinant(upper, pivots)
        c.check(abs(det - 1) <= 1e-6, f"{ranks} rank(s): det = {det!r}, expected 1")
        # Without an interchange the sign would go untested.
        c.check(np.any(pivots != np.arange(12)), f"{ranks} rank(s): no interchange at all")

with suite.case("hilbert n=8: determinant from the factors = c_n^4 / c_2n, 1 and 2 ranks") as c:
    n = 8

    def c_(m):  # c_m = prod_{i=1}^{m-1} i!
        return math.prod(math.factorial(i) for i in range(1, m))

    # det H_n = c_n^4 / c_2n (Choi 1983, Amer. Math. Monthly 90), exact in fractions.
    exact = float(Fraction(c_(n) ** 4, c_(2 * n)))
    # H_8 is ill-conditioned: kappa_2(H_8) = 1.5e10 (numpy.linalg.cond), so the normwise
    # bound kappa u on the relative error of det is 1.7e-6 (u = 2**-53); its componentwise
    # sensitivity to relative changes u in the entries, u sum_ij |inv(H)_ji h_ij|, is 3.8e-7
    # (numpy), which a backward-stable LU with little growth (H is positive definite) adds
    # to rounding the entries. 1e-6 lies between the two; a wrong factor or sign is off by
    # order 1.
    generate(c, "hilbert", n, c.dir / "h.h5")
    for ranks, grid in ((1, None), (2, "2x1")):
        _, _, upper, pivots = solve(c, c.dir / "h.h5", ranks, grid, 3)
        det = determinant(upper, pivots)
        err = abs(det / exact - 1)
        c.check(err <= 1e-6, f"{ranks} rank(s): det = {det!r}, Choi: {exact!r}, rel {err:.1e}")

with suite.case("second-difference n=53: determinant n+1 and X = ones on 1, 2, 4 ranks") as c:
    n = 53
    generate(c, "second-difference", n, c.dir / "s.h5")
    a = read_h5(c.dir / "s.h5", "A")
    for ranks, grid in ((1, None), (2, "1x2"), (4, "2x2")):
        x, _, upper, pivots = solve(c, c.dir / "s.h5", ranks, grid, 16)
        det = determinant(upper, pivots)
        # det = n + 1 (a classical closed form, recalled from memory); the matrix is well
        # conditioned (kappa about 4 (n+1)^2 / pi^2, recalled from memory), so 1e-12 is loose.
        c.check(abs(det / (n + 1) - 1) <= 1e-12,
                f"{ranks} rank(s): det = {det!r}, expected {n + 1}")
        # B = A @ ones, so X = ones; tolerance from kappa and n eps (harness.rel_tol)
        err, tol = rel_diff(x[:, 0], np.ones(n)), rel_tol(a)
        c.check(x.shape == (n, 1) and err <= tol, f"{ranks} rank(s): |X - 1| / |1| = {err:.2e}")


def refused(c, args, ranks=1, mention=None):
    c.failed_with(suite.run("generate", *args, ranks=ranks), USAGE, mention)


with suite.case("generate hilbert without --n: exit 2, one error line (2 ranks)") as c:
    refused(c, ["hilbert", "--out", c.dir / "h.h5"], ranks=2, mention="--n")
    c.check(not (c.dir / "h.h5").exists(), "a file was written")

with suite.case("generate frank --n 0: exit 2, one error line, no file") as c:
    refused(c, ["frank", "--n", 0, "--out", c.dir / "f.h5"], mention="--n")
    c.check(not (c.dir / "f.h5").exists(), "a file was written")

with suite.case("generate wilkinson over an existing file without --force: exit 2, kept") as c:
    out = c.dir / "w.h5"
    out.write_bytes(b"not to be replaced\n")
    refused(c, ["wilkinson", "--n", 10, "--out", out], ranks=2, mention=r"w\.h5")
    c.check(out.read_bytes() == b"not to be replaced\n", "the existing file was changed")
    c.succeeded(suite.run("generate", "wilkinson", "--n", 10, "--out", out, "--force"))
    check_system(c, "wilkinson", 10, out, np.float64)

suite.finish()
