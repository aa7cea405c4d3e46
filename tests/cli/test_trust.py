"""gridlu's trust figures (issue 14) against numpy: backward errors, condition estimates,
forward error bounds, growth, trusted digits and flags, recomputed from the inputs and from the
X gridlu wrote; transposed and adjoint solves; refinement; a non-finite X refused (exit 4) and
too few trusted digits (exit 7).

Sources are named beside the checks. Higham 2002 is N. J. Higham, Accuracy and Stability of
Numerical Algorithms, 2nd ed., SIAM; its section and theorem numbers, and the algorithm number
of Golub & Van Loan 2013, are cited from memory."""

import json
import math
import re
import sys
from fractions import Fraction
from pathlib import Path

import h5py
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import harness  # noqa: E402
from harness import (backward_error, conditioned_matrix, eps, random_matrix, read_h5,  # noqa: E402
                     reference_solution, rel_diff, rel_tol, wide, write_h5)

suite = harness.Suite(__doc__)
rng = np.random.default_rng(20261202)  # fixed, so that a failure can be reproduced
NUMERICAL, REQUIRE_DIGITS, USAGE = 4, 7, 2
LISTS = {"normwise_backward_error": "normwise_backward_errors",
         "componentwise_backward_error": "componentwise_backward_errors",
         "forward_error_bound": "forward_error_bounds"}


# ---------------------------------------------------------------------------------------------
# Figures computed independently in numpy

def unit_roundoff(dtype):
    """u = eps / 2 of the real type (IEEE 754 round to nearest)."""
    return eps(dtype) / 2


def as_number(v):
    """A figure from the report: JSON null stands for an infinite one (issue 14)."""
    return math.inf if v is None else float(v)


def columns(a, x, b):
    """A, X and B in double precision, X and B as n x k."""
    w = wide(a.dtype)
    x, b = np.asarray(x).astype(w), np.asarray(b).astype(w)
    return a.astype(w), x.reshape(len(x), -1), b.reshape(len(b), -1)


def normwise(a, x, b):
    """Per right-hand side ||b - A x||_inf / (||A||_inf ||x||_inf + ||b||_inf) in double
    (Rigal & Gaches 1967; Higham 2002, Thm 7.1)."""
    a, x, b = columns(a, x, b)
    r = np.abs(b - a @ x).max(axis=0)
    return r / (np.linalg.norm(a, np.inf) * np.abs(x).max(axis=0) + np.abs(b).max(axis=0))


def kappa(a, p):
    """||A||_p ||A^-1||_p in double from numpy's explicit inverse, as a real number (numpy's
    own cond returns a complex type for complex A)."""
    a = a.astype(wide(a.dtype))
    return float(np.linalg.norm(a, p) * np.linalg.norm(np.linalg.inv(a), p))


def componentwise(a, x, b):
    """Per right-hand side max_i |r_i| / (|A||x| + |b|)_i in double, 0/0 as 0 and r/0 as
    infinity (Oettli & Prager 1964; Higham 2002, Thm 7.3)."""
    a, x, b = columns(a, x, b)
    r, d = np.abs(b - a @ x), np.abs(a) @ np.abs(x) + np.abs(b)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(d > 0, r / d, np.where(r > 0, np.inf, 0.0))
    return ratio.max(axis=0)


def gepp(a):
    """U of unblocked LU with partial pivoting in double, the first largest entry taken on a tie
    as LAPACK's i?amax does (Golub & Van Loan 2013, Alg. 3.4.1)."""
    u = a.astype(wide(a.dtype))
    for k in range(len(u) - 1):
        p = k + int(np.argmax(np.abs(u[k:, k])))  # argmax: the first of equal maxima
        u[[k, p]] = u[[p, k]]
        if u[k, k] != 0:
            u[k + 1:, k + 1:] -= np.outer(u[k + 1:, k] / u[k, k], u[k, k + 1:])
            u[k + 1:, k] = 0
    return np.triu(u)


def growth_and_pivot(a):
    """max|U| / max|A| and min|U_ii| / max|A| of gepp's U (issue 14's definitions)."""
    u, top = gepp(a), np.abs(a).max()
    return float(np.abs(u).max() / top), float(np.abs(np.diag(u)).min() / top)


def hilbert(n):
    """H_ij = 1 / (i + j - 1), 1-based, rounded to float64."""
    i = np.arange(1, n + 1)
    return 1.0 / (i[:, None] + i[None, :] - 1)


def hilbert_kappa1(n):
    """Exact kappa_1 of the (exact) Hilbert matrix: H^-1 from Choi's closed form in Python
    integers (Choi 1983, Amer. Math. Monthly 90), ||H||_1 as an exact fraction."""
    c = math.comb
    inv = [[(-1) ** (i + j) * (i + j - 1) * c(n + i - 1, n - j) * c(n + j - 1, n - i)
            * c(i + j - 2, i - 1) ** 2 for j in range(1, n + 1)] for i in range(1, n + 1)]
    inv_norm = max(sum(abs(inv[i][j]) for i in range(n)) for j in range(n))
    h_norm = max(sum(Fraction(1, i + j - 1) for i in range(1, n + 1)) for j in range(1, n + 1))
    return float(h_norm * inv_norm)


def row_scaled(n, dtype, k, nrhs):
    """A and B with row i of both scaled by 10^k_i, k_i uniform in [-k, k]: the same system
    row by row, but partial pivoting now favours the big rows, so the small rows' own
    residuals (the componentwise backward error) can be far from the normwise one."""
    d = 10.0 ** rng.integers(-k, k + 1, n)
    a = (random_matrix(rng, (n, n), wide(dtype)) * d[:, None]).astype(dtype)
    b = (random_matrix(rng, (n, nrhs), wide(dtype)) * d[:, None]).astype(dtype)
    return a, b


# ---------------------------------------------------------------------------------------------
# Running gridlu and reading what it wrote

def solve(c, a, b, *extra, ranks=1, tag="x"):
    """Write A and B with h5py, run gridlu solve with `extra` options; returns the run and the
    paths of X and of the report."""
    system = c.dir / "system.h5"
    if not system.exists():
        write_h5(system, {"A": a, "B": b})
    out, report = c.dir / f"{tag}.h5", c.dir / f"{tag}.json"
    run = suite.run("solve", system, "--out", out, "--report", report, *extra, ranks=ranks)
    return run, out, report


def load(path):
    return json.loads(Path(path).read_text())


def near(c, got, want, rel, what):
    """got within a relative `rel` of want (both infinite counts as equal)."""
    got, want = as_number(got), float(want)
    if math.isinf(want) or math.isinf(got):
        return c.check(got == want, f"{what}: {got} (expected {want})")
    return c.check(abs(got - want) <= rel * abs(want), f"{what}: {got!r}, expected {want!r} "
                   f"within a relative {rel:g}")


def within_factor(c, got, want, factor, what):
    got = as_number(got)
    return c.check(want / factor <= got <= want * factor,
                   f"{what}: {got:.3e}, expected within a factor {factor} of {want:.3e}")


def expected_digits(worst, u):
    """The digits issue 14 promises: floor(-log10 bound), 0 for no bound, capped at the type's
    floor(-log10 u); a bound a hair from a power of ten may round either way."""
    cap = math.floor(-math.log10(u))
    if math.isinf(worst):
        return {0}
    if worst == 0:
        return {cap}
    d = -math.log10(worst)
    return {max(0, min(cap, v)) for v in {math.floor(d - 1e-9), math.floor(d + 1e-9)}}


def check_figures(c, r, dtype, nrhs):
    """What any report must hold together, by issue 14's definitions: one entry per right-hand
    side, the worst being the largest; each bound 2 k eta / (1 - k eta) (Higham 2002, Thm 7.2,
    with k the infinity-norm estimate); trusted digits from the worst bound; the flags of the
    backward error and of the conditioning set exactly when their thresholds are crossed."""
    u = unit_roundoff(dtype)
    c.check(r.get("unit_roundoff") == u, f"unit_roundoff = {r.get('unit_roundoff')}, "
            f"numpy's finfo eps / 2 = {u}")
    for worst_key, list_key in LISTS.items():
        values = r.get(list_key)
        c.require(isinstance(values, list) and len(values) == nrhs,
                  f"{list_key} = {values}, expected a list of {nrhs}")
        c.check(as_number(r.get(worst_key)) == max(map(as_number, values)),
                f"{worst_key} = {r.get(worst_key)} is not the largest of {values}")
    k = as_number(r.get("condition_estimate_inf"))
    for eta, bound in zip(r["normwise_backward_errors"], r["forward_error_bounds"]):
        ke = k * as_number(eta)
        near(c, bound, 2 * ke / (1 - ke) if ke < 1 else math.inf, 1e-9,
             f"forward error bound for eta = {eta}, k_inf = {k}")
    worst = as_number(r.get("forward_error_bound"))
    c.check(r.get("trusted_digits") in expected_digits(worst, u),
            f"trusted_digits = {r.get('trusted_digits')} for a worst bound {worst}; expected "
            f"{sorted(expected_digits(worst, u))}")
    flags = r.get("flags")
    c.require(isinstance(flags, list), f"flags = {flags!r}, expected a list")
    want = set()
    if as_number(r.get("normwise_backward_error")) > 1000 * u:
        want.add("backward_error_high")
    # README: the larger of the two estimates counts.
    kappa = max(as_number(r.get("condition_estimate")), as_number(r.get("condition_estimate_inf")))
    if kappa * u >= 0.01:
        want.add("ill_conditioned")
    c.check(set(flags) - {"growth_large"} == want,
            f"flags {flags} for eta = {r.get('normwise_backward_error')}, condition estimate "
            f"{r.get('condition_estimate')}, u = {u}: expected {sorted(want)} (and growth_large?)")
    c.check(r.get("status") == "solved", f"status = {r.get('status')}")


def solved(c, run, report, dtype, nrhs):
    """The run exited 0; its report, checked for consistency, is returned."""
    c.succeeded(run)
    r = load(report)
    check_figures(c, r, dtype, nrhs)
    return r


def nothing_written(c, *paths):
    """Issue 14: on exit 4 nothing is written; no staging directory is left either."""
    for p in paths:
        c.check(not Path(p).exists(), f"{Path(p).name} exists after exit 4")
    stages = [p.name for p in Path(paths[0]).parent.iterdir() if p.name.startswith(".gridlu-stage")]
    c.check(not stages, f"staging left behind: {stages}")


# ---------------------------------------------------------------------------------------------
# 1. Non-finite X

def refused_nonfinite(c, a, b, entry, grids):
    """solve exits 4 with one error line naming `entry`, on each (ranks, grid, block); with a
    block of 1 the entries of X are spread over the ranks, and the first bad one may live on
    rank 1 while rank 0 speaks."""
    for ranks, grid, block in grids:
        tag = f"x{ranks}-{grid}"
        run, out, report = solve(c, a, b, "--grid", grid, "--block", block, ranks=ranks, tag=tag)
        c.failed_with(run, NUMERICAL, re.escape(entry) + r"(?![\[\d])")
        nothing_written(c, out, report)


with suite.case("non-finite X (pivot 1e-300, b = 1e10): exit 4 naming X[0, 1], nothing "
                "written; 1 rank, and 2 ranks with X's column 1 on rank 1") as c:
    a = np.array([[1, 1, 1], [0, 1, 1], [0, 0, 1e-300]])
    b = np.array([[1, 0], [1, 0], [0, 1e10]])
    # Back substitution by hand (A is upper triangular, no interchange): column 1 gives
    # x3 = 1e310 = inf, x2 = -inf, x1 = -(x2 + x3) = NaN; column 0 is (0, 1, 0). The first
    # bad entry, row by row or column by column, is X[0, 1].
    with np.errstate(all="ignore"):
        x3 = b[2] / a[2, 2]
        x2 = b[1] - x3
        x1 = b[0] - x2 - x3
    c.require(np.isfinite(x1[0]) and not np.isfinite(x1[1]) and not np.isfinite(x3[1]),
              "the hand-made solution is not as intended")
    refused_nonfinite(c, a, b, "X[0, 1]", [(1, "1x1", 3), (2, "1x2", 1)])

with suite.case("non-finite X, 1-D B: named X[0], 1 rank (block 3) and 2 ranks (2x1, block 1)") as c:
    a = np.array([[1, 1, 1], [0, 1, 1], [0, 0, 1e-300]])
    b = np.array([0, 0, 1e10])
    # x = (NaN, -inf, inf) as above. Back substitution multiplies every entry of U above the
    # diagonal, zeros too, and 0 x inf is NaN (IEEE 754): a non-finite x_j spoils x_0 .. x_j-1,
    # so the first bad entry of a 1-D X is X[0] whichever entry overflows.
    refused_nonfinite(c, a, b, "X[0]", [(1, "1x1", 3), (2, "2x1", 1)])

def overflowing_system(n):
    """A float32 system whose X does not fit in float32: singular values of A in
    [1e-4, 1e-3] and B ~ 1e37 make ||x||_2 >= 1e3 ||b||_2, beyond float32's 3.4e38."""
    a = (conditioned_matrix(rng, n, np.float64, cond=10) * 1e-4).astype(np.float32)
    b = (random_matrix(rng, (n, 2), np.float64) * 1e37).astype(np.float32)
    return a, b


with suite.case("float32 X beyond float32's range (n=300, B ~ 1e37, A ~ 1e-5): exit 4, "
                "nothing written, 2 ranks") as c:
    n = 300
    a, b = overflowing_system(n)
    top = np.abs(reference_solution(a, b)).max(axis=0)
    # numpy in float64: the exact answer really does not fit in float32, in both columns.
    c.require(np.all(top > 100 * np.finfo(np.float32).max),
              f"numpy's |X| reaches only {top}: the system does not overflow float32")
    run, out, report = solve(c, a, b, "--block", 64, ranks=2)
    line = c.failed_with(run, NUMERICAL)
    named = re.search(r"X\[(\d+), (\d+)\]", line)
    c.check(named and int(named[1]) < n and int(named[2]) < 2,
            f"{line!r} should name an entry X[i, j] of a {n} x 2 X")
    nothing_written(c, out, report)

with suite.case("exit 4 for a non-finite X with --save-factors: no X, no report; A's factors, "
                "valid for other right-hand sides, are kept whole (README)") as c:
    a, b = overflowing_system(100)
    factors = c.dir / "lu.h5"
    run, out, report = solve(c, a, b, "--save-factors", factors, ranks=2)
    c.failed_with(run, NUMERICAL, r"X\[\d+, \d+\]")
    nothing_written(c, out, report)
    c.require(factors.exists(), "the factors of A were not kept")
    with h5py.File(factors, "r") as f:  # reference: h5py reads what gridlu wrote
        c.check(f.attrs.get("gridlu_kind") == b"factors", f"gridlu_kind = {f.attrs.get('gridlu_kind')}")
        c.check(f["LU"].shape == a.shape, f"LU has shape {f['LU'].shape}")


# ---------------------------------------------------------------------------------------------
# 2. Untrustworthy systems flagged

with suite.case("rank-deficient A (n=60, column 7 = 3 x column 2): exit 4, or exit 0 with "
                "ill_conditioned and no trusted digit") as c:
    n = 60
    a = random_matrix(rng, (n, n), np.float64)
    a[:, 7] = 3 * a[:, 2]
    b = random_matrix(rng, (n, 2), np.float64)
    c.require(np.linalg.matrix_rank(a) < n, "A is not rank-deficient in numpy's eyes")
    run, out, report = solve(c, a, b)
    if run.code == NUMERICAL:
        c.failed_with(run, NUMERICAL)  # an exactly zero pivot: singular
        nothing_written(c, out, report)
    else:
        r = solved(c, run, report, np.float64, 2)
        c.check("ill_conditioned" in r["flags"], f"flags {r['flags']} lack ill_conditioned")
        c.check(r.get("trusted_digits") == 0, f"trusted_digits = {r.get('trusted_digits')}")
        # Issue 14: a bound that is null in JSON is inf in the X file.
        in_file = read_h5(out, "forward_error_bounds")
        want = [as_number(v) for v in r["forward_error_bounds"]]
        c.check(list(in_file) == want, f"X file forward_error_bounds {in_file}, report {want}")

ill = {}
with suite.case("kappa ~ 1e15 (n=80, float64): ill_conditioned, at most 2 trusted digits, a "
                "flag line on stdout") as c:
    a = conditioned_matrix(rng, 80, np.float64, cond=1e15)
    b = random_matrix(rng, (80, 2), np.float64)
    u = unit_roundoff(np.float64)
    # numpy's kappa_1 puts the system well past issue 14's threshold kappa u >= 0.01.
    c.require(kappa(a, 1) * u >= 0.05, f"kappa_1 u = {kappa(a, 1) * u:.2e}")
    ill.update(a=a, b=b)
    run, out, report = solve(c, a, b)
    r = solved(c, run, report, np.float64, 2)
    c.check("ill_conditioned" in r["flags"], f"flags {r['flags']} lack ill_conditioned")
    c.check(r.get("trusted_digits") <= 2, f"trusted_digits = {r.get('trusted_digits')} > 2")
    lines = [s for s in run.stdout.splitlines() if s.startswith("  flag")]
    c.check(any("ill_conditioned" in s for s in lines),
            f"no '  flag ill_conditioned' line: {lines}")

with suite.case("--require-digits 8: exit 7 with X written when kappa ~ 1e15, exit 0 when well "
                "conditioned") as c:
    c.require("a" in ill, "the previous case did not build its system")
    run, out, report = solve(c, ill["a"], ill["b"], "--require-digits", 8, tag="ill")
    c.require(not run.hung, f"hung: {run.describe()}")
    c.check(run.code == REQUIRE_DIGITS, f"expected exit 7: {run.describe()}")
    lines = run.gridlu_lines()
    c.check(len(lines) == 1 and "--require-digits" in lines[0],
            f"expected one gridlu: line naming --require-digits on stderr, got {lines}")
    c.require(out.exists(), "X was not written on exit 7")
    x = read_h5(out, "X")
    c.check(x.shape == (80, 2) and np.all(np.isfinite(x)), f"X {x.shape}, finite: "
            f"{np.all(np.isfinite(x))}")
    # README: on exit 7 "X and the report are still written".
    c.require(report.exists(), "no report on exit 7")
    digits = load(report).get("trusted_digits")
    c.check(isinstance(digits, int) and digits < 8, f"report trusted_digits = {digits}")
    good_dir = c.dir / "good"
    good_dir.mkdir()
    a, b = conditioned_matrix(rng, 80, np.float64), random_matrix(rng, (80, 2), np.float64)
    write_h5(good_dir / "system.h5", {"A": a, "B": b})
    run = suite.run("solve", good_dir / "system.h5", "--out", good_dir / "x.h5", "--report",
                    good_dir / "r.json", "--require-digits", 8)
    r = solved(c, run, good_dir / "r.json", np.float64, 2)
    c.check(r.get("trusted_digits") >= 8, f"trusted_digits = {r.get('trusted_digits')} < 8")
    c.check(r.get("job", {}).get("require_digits") == 8,
            f"job.require_digits = {r.get('job', {}).get('require_digits')}")


# ---------------------------------------------------------------------------------------------
# 3. Condition estimates

def estimate_ok(c, got, exact, n, what):
    """A Hager/Higham estimate is the norm of A^-1 applied to some unit vector, so it stays
    below the exact value up to the rounding of that product, about n kappa u relative
    (Higham 2002, §14.3 on computed inverses, and the float64 rounding of the input), and
    it is rarely off by more than a factor 3 (Hager 1984, SIAM J. Sci. Stat. Comput. 5;
    Higham 1988, ACM TOMS 14; Higham 2002, §15.3)."""
    got = as_number(got)
    top = exact * (1 + max(1e-7, n * exact * unit_roundoff(np.float64)))
    c.check(exact / 3 <= got <= top, f"{what} = {got:.6e}, exact {exact:.6e}: expected in "
            f"[exact / 3, {top:.6e}]")


def grid_args(grid):
    p, q = map(int, grid.split("x"))
    return p * q, ["--grid", grid]


with suite.case("Hilbert n=10: condition estimates against Choi's exact inverse, 1 and 2 "
                "ranks") as c:
    n = 10
    a, exact = hilbert(n), hilbert_kappa1(n)
    # H is symmetric, so kappa_inf = kappa_1.
    b = random_matrix(rng, (n, 1), np.float64)
    for ranks, extra in ((1, []), (2, ["--grid", "2x1", "--block", 4])):
        run, out, report = solve(c, a, b, *extra, ranks=ranks, tag=f"x{ranks}")
        r = solved(c, run, report, np.float64, 1)
        estimate_ok(c, r.get("condition_estimate"), exact, n, f"{ranks} rank(s): kappa_1")
        estimate_ok(c, r.get("condition_estimate_inf"), exact, n, f"{ranks} rank(s): kappa_inf")
        # kappa u = 3.9e-3 < 0.01: issue 14's threshold is not crossed.
        c.check("ill_conditioned" not in r["flags"], f"flags {r['flags']}: Hilbert 10 has "
                f"kappa u = {exact * unit_roundoff(np.float64):.1e} < 0.01")


def condition_case(dtype):
    with suite.case(f"random {np.dtype(dtype).name} n=157 --block 16: condition estimates vs "
                    "numpy on grids 1x1, 1x2, 2x1, 2x2") as c:
        n = 157
        a, b = random_matrix(rng, (n, n), dtype), random_matrix(rng, (n, 1), dtype)
        # reference: numpy.linalg.norm of A and of numpy.linalg.inv(A)
        k1, kinf = kappa(a, 1), kappa(a, np.inf)
        for grid in ("1x1", "1x2", "2x1", "2x2"):
            ranks, extra = grid_args(grid)
            run, out, report = solve(c, a, b, *extra, "--block", 16, ranks=ranks, tag=grid)
            r = solved(c, run, report, dtype, 1)
            estimate_ok(c, r.get("condition_estimate"), k1, n, f"grid {grid}: kappa_1")
            estimate_ok(c, r.get("condition_estimate_inf"), kinf, n, f"grid {grid}: kappa_inf")


condition_case(np.float64)
condition_case(np.complex128)


# ---------------------------------------------------------------------------------------------
# 4. Backward errors recomputed from X

def backward_case(dtype, ranks):
    single = np.dtype(dtype) in (np.float32, np.complex64)
    with suite.case(f"backward errors of a row-scaled {np.dtype(dtype).name} system (n=100, "
                    f"rows x 10^[-4, 4]) vs numpy from gridlu's X, {ranks} rank(s)") as c:
        a, b = row_scaled(100, dtype, 4, 2)
        run, out, report = solve(c, a, b, "--block", 16, ranks=ranks)
        r = solved(c, run, report, dtype, 2)
        x = read_h5(out, "X")
        cw, nw = componentwise(a, x, b), normwise(a, x, b)
        u = unit_roundoff(dtype)
        # The system is meant to tell the two apart (Higham 2002, §7.2 on row scaling).
        c.check(cw.max() > 3 * nw.max(), f"componentwise {cw} vs normwise {nw}: too alike")
        for k in range(2):
            for name, mine in (("componentwise", cw[k]), ("normwise", nw[k])):
                got = r[f"{name}_backward_errors"][k]
                if single:
                    # Residuals in double of single data: only double rounding separates them.
                    near(c, got, mine, 1e-3, f"RHS {k}: {name} backward error (numpy {mine:.3e})")
                else:
                    # Residuals of double data formed in double carry rounding errors of
                    # the residual's own size: agreement within a small factor only.
                    within_factor(c, got, mine, 4, f"RHS {k}: {name} backward error")
                    c.check(max(as_number(got), mine) < 100 * u,
                            f"RHS {k}: {name} backward error {got} / numpy {mine:.2e} >= 100 u")


backward_case(np.float32, 2)
backward_case(np.complex64, 1)
backward_case(np.float64, 2)


# ---------------------------------------------------------------------------------------------
# 5. Wilkinson's growth

def wilkinson(n):
    """1 on the diagonal, -1 below, 1 in the last column: partial pivoting doubles the last
    column at every step, growth 2^(n-1) (Wilkinson 1961; Higham 2002, §9.4)."""
    w = np.tril(-np.ones((n, n)), -1) + np.eye(n)
    w[:, -1] = 1
    return w


with suite.case("Wilkinson's matrix n=40 --block 16: growth_factor == 2^39, growth_large, "
                "1 and 4 ranks") as c:
    w = wilkinson(40)
    growth, pivot = growth_and_pivot(w)
    c.require(growth == 2.0 ** 39, f"plain GEPP in numpy gives growth {growth}, not 2^39")
    b = random_matrix(rng, (40, 1), np.float64)
    for ranks in (1, 4):
        run, out, report = solve(c, w, b, "--block", 16, ranks=ranks, tag=f"x{ranks}")
        r = solved(c, run, report, np.float64, 1)
        c.check(r.get("growth_factor") == 2.0 ** 39,
                f"{ranks} rank(s): growth_factor = {r.get('growth_factor')}, expected 2^39")
        c.check(r.get("smallest_pivot") == pivot,
                f"{ranks} rank(s): smallest_pivot = {r.get('smallest_pivot')}, expected {pivot}")
        c.check("growth_large" in r["flags"], f"{ranks} rank(s): flags {r['flags']}")

with suite.case("growth factor and smallest pivot of a random float64 system vs a plain GEPP "
                "in numpy, 2 ranks") as c:
    a, b = random_matrix(rng, (100, 100), np.float64), random_matrix(rng, (100, 1), np.float64)
    growth, pivot = growth_and_pivot(a)
    run, out, report = solve(c, a, b, "--block", 16, ranks=2)
    r = solved(c, run, report, np.float64, 1)
    # The same pivots as an unblocked elimination; the entries agree up to rounding.
    near(c, r.get("growth_factor"), growth, 1e-8, "growth_factor")
    near(c, r.get("smallest_pivot"), pivot, 1e-8, "smallest_pivot")
    c.check("growth_large" not in r["flags"], f"growth {growth:.1f} flagged: {r['flags']}")


# ---------------------------------------------------------------------------------------------
# 6. Transposed and adjoint solves

def system_matrix(a, mode):
    return {"--transpose": a.T, "--adjoint": a.conj().T}[mode]


def check_transposed(c, r, out, a, b, mode, what):
    """X against numpy.linalg.solve of the transposed or adjoint system; the report's figures
    are those of that system (issue 14): its backward error, and kappa_1(A^T) = kappa_inf(A)."""
    m = system_matrix(a, mode)
    x = read_h5(out, "X")
    c.require(x.shape == b.shape, f"{what}: X {x.shape}, B {b.shape}")
    err, tol = rel_diff(x, reference_solution(m, b)), rel_tol(m)
    # reference: numpy.linalg.solve(A^T or A^H, B)
    c.check(err <= tol, f"{what}: ||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > {tol:.2e}")
    mine, limit = backward_error(m, x, b), 10 * len(a) * eps(a.dtype)
    # Residuals of double data formed in double: agreement within a small factor (as above).
    within_factor(c, r.get("normwise_backward_error"), mine, 4, f"{what}: normwise backward error")
    for k, (got, own) in enumerate(zip(r["normwise_backward_errors"], normwise(m, x, b))):
        within_factor(c, got, own, 4, f"{what}: RHS {k}: normwise backward error")
    c.check(as_number(r.get("normwise_backward_error")) <= limit,
            f"{what}: normwise backward error {r.get('normwise_backward_error')} > 10 n eps")
    estimate_ok(c, r.get("condition_estimate"), kappa(m, 1), len(a),
                f"{what}: kappa_1 of the system matrix")
    want = {"--transpose": "A^T", "--adjoint": "A^H"}[mode]
    c.check(r.get("job", {}).get("solve_with") == want,
            f"{what}: job.solve_with = {r.get('job', {}).get('solve_with')}, expected {want}")
    return x


def lopsided(c, dtype):
    """A random 75 x 75 A with row 10 a hundred times the others: kappa_1(A^T) = kappa_inf(A)
    is then some 30 times kappa_1(A), so a condition estimate of A instead of the system matrix
    falls outside the factor 3 allowed (Higham 2002, §15.3)."""
    a = random_matrix(rng, (75, 75), dtype)
    a[10] *= 100
    ratio = kappa(a, np.inf) / kappa(a, 1)
    c.require(ratio > 9, f"kappa_inf / kappa_1 = {ratio:.1f}: A^T and A too alike")
    return a


def transpose_case(dtype):
    with suite.case(f"--transpose and --adjoint, {np.dtype(dtype).name} n=75, 3 RHS, --block 16, "
                    "grids 1x1, 1x2, 2x1, 2x2") as c:
        a, b = lopsided(c, dtype), random_matrix(rng, (75, 3), dtype)
        for grid in ("1x1", "1x2", "2x1", "2x2"):
            ranks, extra = grid_args(grid)
            xs = {}
            for mode in ("--transpose", "--adjoint"):
                tag = f"{grid}{mode}"
                run, out, report = solve(c, a, b, mode, *extra, "--block", 16, ranks=ranks, tag=tag)
                r = solved(c, run, report, dtype, 3)
                xs[mode] = check_transposed(c, r, out, a, b, mode, f"grid {grid} {mode}")
            if not np.iscomplexobj(a):
                # For real A, A^H = A^T: the same system.
                d = rel_diff(xs["--adjoint"], xs["--transpose"])
                c.check(d <= 1e-14,
                        f"grid {grid}: real --adjoint and --transpose differ by {d:.1e}")


transpose_case(np.float64)
transpose_case(np.complex128)


def factors_case(dtype):
    with suite.case(f"{np.dtype(dtype).name}: --save-factors, then --factors with --transpose "
                    "and --adjoint, also with --rhs-file, 2 ranks") as c:
        a, b = lopsided(c, dtype), random_matrix(rng, (75, 3), dtype)
        b2 = random_matrix(rng, (75, 2), dtype)
        write_h5(c.dir / "rhs2.h5", {"B": b2})
        lu = c.dir / "lu.h5"
        run, out, report = solve(c, a, b, "--save-factors", lu, "--block", 16, ranks=2, tag="x0")
        solved(c, run, report, dtype, 3)
        for mode in ("--transpose", "--adjoint"):
            for rhs, extra in ((b, []), (b2, ["--rhs-file", c.dir / "rhs2.h5"])):
                tag = f"f{mode}{len(extra)}"
                run, out, report = solve(c, a, b, "--factors", lu, mode, *extra, ranks=2, tag=tag)
                r = solved(c, run, report, dtype, rhs.shape[1])
                what = f"from factors {mode}" + (" --rhs-file" if extra else "")
                check_transposed(c, r, out, a, rhs, mode, what)


factors_case(np.float64)
factors_case(np.complex128)

with suite.case("--transpose --adjoint together: usage error, exit 2") as c:
    a, b = random_matrix(rng, (20, 20), np.float64), random_matrix(rng, (20, 1), np.float64)
    run, out, report = solve(c, a, b, "--transpose", "--adjoint")
    # Issue 14 asks for exit 2; the wording is the option parser's or gridlu's own.
    c.require(not run.hung, f"hung: {run.describe()}")
    c.check(run.code == USAGE, f"expected exit 2: {run.describe()}")
    c.check("transpose" in run.stderr and "adjoint" in run.stderr,
            f"stderr should name both options: {run.stderr.strip()!r}")
    c.check(not out.exists() and not report.exists(), "an output was written on a usage error")


# ---------------------------------------------------------------------------------------------
# 7. float32 thresholds

with suite.case("float32: a well-conditioned system (n=200) has no flags and >= 3 digits; "
                "kappa ~ 1e6 is ill-conditioned in float32 but not in float64") as c:
    a, b = conditioned_matrix(rng, 200, np.float32), random_matrix(rng, (200, 2), np.float32)
    run, out, report = solve(c, a, b, ranks=2, tag="good")
    r = solved(c, run, report, np.float32, 2)
    c.check(r.get("unit_roundoff") == np.finfo(np.float32).eps / 2,
            f"unit_roundoff = {r.get('unit_roundoff')}")  # IEEE 754 binary32: u = 2^-24
    c.check(r["flags"] == [], f"flags {r['flags']} on a well-conditioned system")
    c.check(r.get("trusted_digits") >= 3, f"trusted_digits = {r.get('trusted_digits')}")
    ratio = as_number(r.get("normwise_backward_error")) / r["unit_roundoff"]
    # Backward stability of LU with partial pivoting: eta a modest multiple of u
    # (Higham 2002, §9.3).
    c.check(ratio < 1000, f"normwise backward error = {ratio:.1f} u")
    near(c, r.get("normwise_backward_error"), normwise(a, read_h5(out, "X"), b).max(), 1e-3,
         "normwise backward error vs numpy from X")
    bad64 = conditioned_matrix(rng, 200, np.float64, cond=1e6)
    bad32 = bad64.astype(np.float32)
    # numpy: kappa_1 u well past 0.01 in float32, far below it in float64.
    k32, k64 = kappa(bad32, 1), kappa(bad64, 1)
    c.require(k32 * unit_roundoff(np.float32) >= 0.03 and k64 * unit_roundoff(np.float64) < 1e-6,
              f"kappa_1 = {k32:.2e} (float32), {k64:.2e} (float64): not as intended")
    for dtype, m in ((np.float32, bad32), (np.float64, bad64)):
        d = c.dir / np.dtype(dtype).name
        d.mkdir()
        write_h5(d / "system.h5", {"A": m, "B": b.astype(dtype)})
        run = suite.run("solve", d / "system.h5", "--out", d / "x.h5", "--report", d / "r.json")
        r = solved(c, run, d / "r.json", dtype, 2)
        flagged = "ill_conditioned" in r["flags"]
        c.check(flagged == (dtype == np.float32), f"{np.dtype(dtype).name}: flags {r['flags']}")


# ---------------------------------------------------------------------------------------------
# 8. Refinement

with suite.case("--refine on a row-scaled float64 system (n=120, rows x 10^[-8, 8]): the "
                "componentwise backward error falls below 10 u") as c:
    a, b = row_scaled(120, np.float64, 8, 2)
    u = unit_roundoff(np.float64)
    plain = componentwise(a, reference_solution(a, b), b).max()
    # Without refinement (LAPACK via numpy) the componentwise error is well above 10 u, so
    # refinement has work to do (Skeel 1980, Math. Comp. 35; Higham 2002, §12.2).
    c.require(plain > 10 * u, f"numpy's unrefined componentwise error is only {plain / u:.1f} u")
    run, out, report = solve(c, a, b, "--refine", ranks=2)
    r = solved(c, run, report, np.float64, 2)
    ref = r.get("refinement")
    c.require(isinstance(ref, dict), f"refinement = {ref!r}")
    c.check(r.get("job", {}).get("refine") is True,
            f"job.refine = {r.get('job', {}).get('refine')}")
    c.check(isinstance(ref.get("iterations"), int) and ref["iterations"] >= 1,
            f"refinement.iterations = {ref.get('iterations')}")
    history = [as_number(v) for v in ref.get("componentwise_backward_errors", [])]
    for key in ("componentwise_backward_errors", "normwise_backward_errors"):
        # Issue 14: [before, after iteration 1, ...], one entry more than iterations.
        c.check(len(ref.get(key, [])) == ref.get("iterations", -2) + 1,
                f"refinement.{key} = {ref.get(key)} for {ref.get('iterations')} iteration(s)")
    c.require(len(history) >= 2, f"componentwise history {history}: expected before and after")
    # Refinement goes on only while the error falls, so only the step that ended it may show
    # a rise, as in LAPACK's xGERFS (Higham 2002, §12.3).
    c.check(all(p >= q for p, q in zip(history[:-1], history[1:-1])),
            f"refinement went on after a rise: {history}")
    c.check(history[-1] <= history[0], f"history ends above its start: {history}")
    final = as_number(r.get("componentwise_backward_error"))
    c.check(final in history, f"componentwise backward error {final} not one of {history}")
    c.check(final < 10 * u, f"componentwise backward error after refinement {final / u:.1f} u")
    x = read_h5(out, "X")
    mine = componentwise(a, x, b).max()
    # The figure describes the X written: numpy's from the file agrees (in double, factor 4).
    within_factor(c, final, mine, 4, "componentwise backward error vs numpy from X")
    c.check(mine < 10 * u, f"numpy's componentwise error of the refined X: {mine / u:.1f} u")
    # Skeel's condition number is that of the unscaled matrix (~1e4): X is accurate.
    err = rel_diff(x, reference_solution(a, b))
    c.check(err <= 1e-8, f"refined X differs from numpy's by {err:.1e}")


# ---------------------------------------------------------------------------------------------
# 9. Demo

with suite.case("demo --n 300 --rhs 2 on 2 ranks: the same figures in its report and on "
                "stdout") as c:
    report = c.dir / "d.json"
    run = suite.run("demo", "random", "--n", 300, "--rhs", 2, "--report", report, ranks=2)
    c.succeeded(run)
    r = load(report)
    keys = ["unit_roundoff", "normwise_backward_error", "normwise_backward_errors",
            "componentwise_backward_error", "componentwise_backward_errors", "condition_estimate",
            "forward_error_bound", "forward_error_bounds", "growth_factor", "smallest_pivot",
            "trusted_digits", "flags"]
    missing = [k for k in keys if k not in r]
    c.require(not missing, f"demo report lacks {missing}")
    check_figures(c, r, np.float64, 2)
    c.check(r["trusted_digits"] >= 8, f"trusted_digits = {r['trusted_digits']}")
    for head in ("  accuracy", "  trust"):
        c.check(any(s.startswith(head) for s in run.stdout.splitlines()),
                f"no stdout line starting {head!r}:\n{run.stdout}")


# ---------------------------------------------------------------------------------------------
# 10. The X file

with suite.case("the X file carries the report's figures (float64 n=100, 3 RHS, 2 ranks)") as c:
    a, b = conditioned_matrix(rng, 100, np.float64), random_matrix(rng, (100, 3), np.float64)
    run, out, report = solve(c, a, b, ranks=2)
    r = solved(c, run, report, np.float64, 3)
    with h5py.File(out, "r") as f:
        for key in LISTS.values():
            c.require(key in f, f"X file lacks dataset {key}")
            got = f[key][()]
            want = np.array([as_number(v) for v in r[key]])
            c.check(got.shape == (3,) and np.allclose(got, want, rtol=1e-14, atol=0),
                    f"dataset {key} = {got}, report {r[key]}")
        attrs = f["X"].attrs
        c.check(attrs.get("trusted_digits") == r["trusted_digits"],
                f"attribute trusted_digits = {attrs.get('trusted_digits')}, report "
                f"{r['trusted_digits']}")
        for key in ("condition_estimate", "growth_factor", "smallest_pivot", "unit_roundoff",
                    *LISTS):
            if c.check(key in attrs, f"X lacks attribute {key}"):
                near(c, float(attrs[key]), as_number(r.get(key)), 1e-14, f"attribute {key}")
        flags = attrs.get("flags")
        flags = flags.decode() if isinstance(flags, bytes) else flags
        c.check(flags == ",".join(r["flags"]), f"attribute flags = {flags!r}, report {r['flags']}")
    # The figures are those of this X (numpy from the file).
    nw = normwise(a, read_h5(out, "X"), b)
    for k in range(3):
        within_factor(c, r["normwise_backward_errors"][k], nw[k], 4, f"RHS {k}: normwise")

suite.finish()
