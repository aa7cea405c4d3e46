"""gridlu's mixed precision (--precision mixed and mixed-krylov) against numpy: X from a
single-precision factorization refined in double must match numpy.linalg.solve and a
--precision double run of the same system; systems too ill-conditioned for classical
refinement give way to double and say so, and the Krylov variant carries them; a mixed
solve stopped with a checkpoint holds a single-precision working matrix and resumes on
another grid; the usage errors; demo and bench; the memory mixed precision costs.

Sources are named beside the checks. Higham 2002 is N. J. Higham, Accuracy and Stability of
Numerical Algorithms, 2nd ed., SIAM; Langou et al. 2006 is the SC 2006 paper on 32-bit
factorizations refined to 64-bit accuracy that include/gridlu/mixed.hpp follows; Carson &
Higham 2017/2018 are the SIAM J. Sci. Comput. papers on GMRES-based refinement. Their
section numbers and the condition numbers of Hilbert matrices are cited from memory; the
latter are checked against numpy before use."""

import json
import math
import re
import sys
from pathlib import Path

import h5py
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import harness  # noqa: E402
from harness import (backward_error, conditioned_matrix, eps, random_matrix, read_h5,  # noqa: E402
                     reference_solution, rel_diff, rel_tol, write_h5)

# The partial-LU check of a checkpoint's working matrix, shared with the checkpoint tests.
sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "checkpoint"))
from checkpoint_support import Job, Watch, after_commits, partial_lu_problems, text  # noqa: E402

suite = harness.Suite(__doc__)
rng = np.random.default_rng(20261203)  # fixed, so that a failure can be reproduced
USAGE, STOPPED = 2, 5
# Unit roundoffs, IEEE 754 round to nearest: 2^-53 (binary64) and 2^-24 (binary32).
U = eps(np.float64) / 2
U_SINGLE = eps(np.float32) / 2
GAVE_WAY = re.compile(r"^gridlu: mixed precision gave way to double: (\S.*)$")


# ---------------------------------------------------------------------------------------------
# Running gridlu and reading what it wrote

def load(path):
    return json.loads(Path(path).read_text())


def solve(c, system, precision, *extra, ranks=1, tag=None):
    """gridlu solve SYSTEM with --precision PRECISION and `extra`; the run and the paths of X
    and of the report."""
    tag = tag or precision
    out, report = c.dir / f"{tag}.h5", c.dir / f"{tag}.json"
    run = suite.run("solve", system, "--out", out, "--report", report, "--precision", precision,
                    *extra, ranks=ranks)
    return run, out, report


def write_system(c, a, b, name="system.h5"):
    path = c.dir / name
    write_h5(path, {"A": a, "B": b})
    return path


def root_attr(path, name):
    """A root attribute of a file gridlu wrote, read with h5py, as str."""
    with h5py.File(path, "r") as f:
        return text(f.attrs[name]) if name in f.attrs else None


def converged(c, run, report, out, precision):
    """The run exited 0 without a diagnostic and the report and X's file say `precision` was
    used with no fallback; the report is returned."""
    c.succeeded(run)
    r = load(report)
    c.check(r.get("precision") == precision, f"precision = {r.get('precision')!r}")
    c.check(r.get("precision_used") == precision,
            f"precision_used = {r.get('precision_used')!r}, fallback {r.get('fallback')!r}")
    c.check(r.get("fallback") == "", f"fallback = {r.get('fallback')!r}")
    c.check(r.get("job", {}).get("precision") == precision,
            f"job.precision = {r.get('job', {}).get('precision')!r}")
    # h5py reads the job's fields off X's file.
    c.check(root_attr(out, "precision") == precision,
            f"X file attribute precision = {root_attr(out, 'precision')!r}")
    c.check(root_attr(out, "fallback") == "",
            f"X file attribute fallback = {root_attr(out, 'fallback')!r}")
    c.check(any(s.startswith(f"  precision  {precision}") for s in run.stdout.splitlines()),
            f"no '  precision  {precision}' line on stdout:\n{run.stdout}")
    return r


def fell_back(c, run, report, out, precision):
    """The run exited 0 with exactly one diagnostic, mixed precision giving way to double,
    whose reason the report and X's file repeat; the report is returned."""
    c.require(not run.hung, f"hung: {run.describe()}")
    c.require(run.code == 0, f"expected exit 0: {run.describe()}")
    r = load(report)
    c.check(r.get("precision") == precision, f"precision = {r.get('precision')!r}")
    c.check(r.get("precision_used") == "double", f"precision_used = {r.get('precision_used')!r}")
    # gridlu's notices (like what --force discards) go to stdout with a "gridlu:" prefix,
    # at once, before the summary; errors alone go to stderr.
    lines = [s for s in run.stdout.splitlines() if s.startswith("gridlu:")]
    said = GAVE_WAY.match(lines[0]) if len(lines) == 1 else None
    c.check(said, f"expected one 'gridlu: mixed precision gave way to double: WHY' line on "
            f"stdout, got {lines}")
    c.check(not run.gridlu_lines(), f"stderr has gridlu lines: {run.gridlu_lines()}")
    # The remaining checks go on with the report's reason when stdout did not give one.
    why = said[1] if said else r.get("fallback")
    c.require(isinstance(why, str) and why, f"fallback = {r.get('fallback')!r}: no reason given")
    c.check(r.get("fallback") == why, f"fallback = {r.get('fallback')!r}, stdout said {why!r}")
    c.check(root_attr(out, "fallback") == why,
            f"X file attribute fallback = {root_attr(out, 'fallback')!r}, stdout said {why!r}")
    head = f"  precision  {precision} gave way"
    c.check(any(s.startswith(head) for s in run.stdout.splitlines()),
            f"no {head!r} line on stdout:\n{run.stdout}")
    return r


def within_factor(c, got, want, factor, what):
    return c.check(want / factor <= got <= want * factor,
                   f"{what}: {got:.3e}, expected within a factor {factor} of {want:.3e}")


def check_history(c, r, a, x, b):
    """refinement_backward_errors: the normwise backward error of the first X and after each
    correction (one more entry than corrections); the first is that of a single-precision
    solve, the last that of the X written, which numpy recomputes."""
    hist = r.get("refinement_backward_errors")
    steps = r.get("refinement_iterations")
    c.require(isinstance(hist, list) and isinstance(steps, int) and len(hist) == steps + 1,
              f"refinement_backward_errors {hist} for {steps} correction(s)")
    # A solve with single-precision factors leaves a backward error of the single class,
    # far above double's (Higham 2002, Thm 9.4 with u = 2^-24); so at least one correction.
    c.check(hist[0] > 1000 * U and steps >= 1,
            f"first backward error {hist[0]:.2e} after {steps} correction(s): the single-precision"
            " solve alone cannot reach double precision")
    # Residuals of the same X in double: agreement within a small factor (Higham 2002, §12.1:
    # r is itself computed with an error of order n u |A||x|).
    within_factor(c, hist[-1], backward_error(a, x, b), 4,
                  "last refinement backward error vs numpy's from X")


def flat(x):
    return np.asarray(x).reshape(len(x), -1)


# ---------------------------------------------------------------------------------------------
# 1. Well-conditioned systems: mixed reaches double's accuracy

def double_class(n):
    """The floor of backward_same_class: sqrt(n) u."""
    return math.sqrt(n) * U


def backward_same_class(c, a, b, x_mixed, x_double, what):
    """Mixed precision aims at double's backward error (Langou et al. 2006): numpy's normwise
    figure of the mixed X within a factor 4 of the double X's, or below sqrt(n) u. That floor,
    not 10 u: the stopping rule, ||r||_2 <= sqrt(n) u ||A||_F ||x||_2 (checked below), admits
    some 100 u for these systems, and complex ones of n = 301 stop near 12 u where double
    reaches 0.5 u (measured); a single-precision answer would sit some 1e8 times higher."""
    mine, theirs = backward_error(a, x_mixed, b), backward_error(a, x_double, b)
    floor = double_class(len(a))
    c.check(mine <= max(4 * theirs, floor), f"{what}: normwise backward error of the mixed X "
            f"{mine / U:.1f} u, of the double X {theirs / U:.1f} u (floor {floor / U:.1f} u)")


def well_conditioned(dtype, cond):
    n, block = 301, 32  # n not a multiple of the block: a ragged last block row and column
    grids = [("1x1", 1, 1), ("1x2", 2, 3), ("2x1", 2, 1), ("2x2", 4, 3)]
    name = np.dtype(dtype).name
    with suite.case(f"{name} n={n} kappa={cond:g} --block {block}, grids 1x1/1x2/2x1/2x2 with 1 "
                    "and 3 RHS: mixed converges, X as numpy's and double's") as c:
        a = conditioned_matrix(rng, n, dtype, cond)
        for grid, ranks, nrhs in grids:
            b = random_matrix(rng, (n, nrhs), dtype)
            system = write_system(c, a, b, f"system-{grid}.h5")
            extra = ["--grid", grid, "--block", block]
            run, out, report = solve(c, system, "mixed", *extra, ranks=ranks, tag=f"mixed-{grid}")
            r = converged(c, run, report, out, "mixed")
            x = read_h5(out, "X")
            c.require(x.shape == b.shape, f"grid {grid}: X {x.shape}, B {b.shape}")
            check_history(c, r, a, x, b)
            run, dout, _ = solve(c, system, "double", *extra, ranks=ranks, tag=f"double-{grid}")
            c.succeeded(run)
            backward_same_class(c, a, b, x, read_h5(dout, "X"), f"grid {grid}")
            # reference: numpy.linalg.solve; forward error <= kappa x backward error
            err, tol = rel_diff(x, reference_solution(a, b)), rel_tol(a)
            c.check(err <= tol, f"grid {grid}: ||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > "
                    f"{tol:.2e}")
            # The trust figures judge the X written (numpy from the file, factor 4 as above).
            within_factor(c, r.get("normwise_backward_error"), backward_error(a, x, b), 4,
                          f"grid {grid}: report's normwise backward error vs numpy's")
            # Langou et al. 2006's stopping rule, which the run claims X met: per column
            # ||r||_2 <= ||x||_2 ||A||_F sqrt(n) u, recomputed in numpy (a margin of 2 for the
            # rounding of r itself).
            xr, br = flat(x), flat(b)
            res = np.linalg.norm(br - a @ xr, axis=0)
            limit = np.linalg.norm(xr, axis=0) * np.linalg.norm(a) * math.sqrt(n) * U
            c.check(np.all(res <= 2 * limit), f"grid {grid}: ||r||_2 / (||x||_2 ||A||_F sqrt(n) "
                    f"u) = {res / limit}")


well_conditioned(np.float64, 1e5)
well_conditioned(np.complex128, 1e6)


# ---------------------------------------------------------------------------------------------
# 2. Transposed and adjoint systems

def op(a, mode):
    return {"--transpose": a.T, "--adjoint": a.conj().T}[mode]


for dtype, modes in ((np.float64, ["--transpose"]), (np.complex128, ["--transpose", "--adjoint"])):
    name = np.dtype(dtype).name
    with suite.case(f"{name} n=200 kappa=1e4, 2 RHS, 2 ranks: mixed {' and '.join(modes)} vs "
                    "numpy") as c:
        n = 200
        a, b = conditioned_matrix(rng, n, dtype, 1e4), random_matrix(rng, (n, 2), dtype)
        system = write_system(c, a, b)
        for mode in modes:
            m = op(a, mode)
            tag = mode.strip("-")
            run, out, report = solve(c, system, "mixed", mode, "--block", 32, ranks=2,
                                     tag=f"mixed-{tag}")
            r = converged(c, run, report, out, "mixed")
            want = {"--transpose": "A^T", "--adjoint": "A^H"}[mode]
            c.check(r.get("job", {}).get("solve_with") == want,
                    f"{mode}: job.solve_with = {r.get('job', {}).get('solve_with')!r}")
            x = read_h5(out, "X")
            check_history(c, r, m, x, b)
            # reference: numpy.linalg.solve(A^T or A^H, B); with A itself X would be far off
            err, tol = rel_diff(x, reference_solution(m, b)), rel_tol(m)
            c.check(err <= tol, f"{mode}: ||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > "
                    f"{tol:.2e}")
            run, dout, _ = solve(c, system, "double", mode, "--block", 32, ranks=2,
                                 tag=f"double-{tag}")
            c.succeeded(run)
            backward_same_class(c, m, b, x, read_h5(dout, "X"), mode)


# ---------------------------------------------------------------------------------------------
# 3. Too ill-conditioned for classical refinement

def kappa_inf(a):
    """||A||_inf ||A^-1||_inf from numpy's explicit inverse."""
    return float(np.linalg.norm(a, np.inf) * np.linalg.norm(np.linalg.inv(a), np.inf))


def generated_hilbert(c, n):
    """gridlu generate hilbert --n N, A checked against numpy's 1/(i+j+1) (0-based)."""
    path = c.dir / f"hilbert{n}.h5"
    run = suite.run("generate", "hilbert", "--n", n, "--out", path)
    c.succeeded(run)
    a, b = read_h5(path, "A"), read_h5(path, "B")
    i = np.arange(n)
    # IEEE division is correctly rounded, so numpy's entries are the very same doubles.
    c.require(np.array_equal(a, 1.0 / (i[:, None] + i[None, :] + 1)), "A is not Hilbert's")
    return path, a, b


with suite.case("Hilbert n=12 (kappa ~ 1e16): mixed gives way to double, says so; X written "
                "and flagged ill_conditioned") as c:
    path, a, b = generated_hilbert(c, 12)
    # kappa_2(H_12) ~ 1.7e16 (recalled from memory); numpy's figure is itself rough this close
    # to 1/u, but it cannot be small.
    c.require(np.linalg.cond(a) > 1e15, f"numpy's cond(H_12) = {np.linalg.cond(a):.2e}")
    run, out, report = solve(c, path, "mixed")
    r = fell_back(c, run, report, out, "mixed")
    x = read_h5(out, "X")
    c.check(x.shape == b.shape and np.all(np.isfinite(x)), f"X {x.shape}, finite: "
            f"{np.all(np.isfinite(x))}")
    # The double factorization that took over is backward stable (Higham 2002, Thm 9.4).
    mine = backward_error(a, x, b)
    c.check(mine <= 10 * U, f"numpy's normwise backward error of X: {mine / U:.1f} u")
    within_factor(c, r.get("normwise_backward_error"), mine, 4,
                  "report's normwise backward error vs numpy's")
    # kappa u >= 0.01 is the README's threshold for the flag; here kappa u ~ 2.
    c.check("ill_conditioned" in r.get("flags", []), f"flags {r.get('flags')}")
    c.check(r.get("trusted_digits", 99) <= 1, f"trusted_digits = {r.get('trusted_digits')}")


def beyond_classical(c, path, a, b, x_true=None):
    """Classical refinement contracts the error by about kappa u_single per step and needs
    that below 1 (Higham 2002, §12.1; Langou et al. 2006), so with kappa_inf u_single > 30 mixed
    gives way; GMRES preconditioned with the same factors converges up to far larger kappa
    (Carson & Higham 2017, 2018), so mixed-krylov does not."""
    k = kappa_inf(a)
    c.require(k * U_SINGLE > 30, f"numpy's kappa_inf = {k:.2e}: kappa u_single = "
              f"{k * U_SINGLE:.1f}, too small to defeat classical refinement")
    run, out, report = solve(c, path, "mixed", ranks=2)
    fell_back(c, run, report, out, "mixed")
    run, out, report = solve(c, path, "mixed-krylov", ranks=2)
    r = converged(c, run, report, out, "mixed-krylov")
    steps, inner = r.get("refinement_iterations"), r.get("refinement_inner_iterations")
    c.check(isinstance(inner, list) and inner and len(inner) == steps
            and all(isinstance(v, int) and v >= 1 for v in inner),
            f"refinement_inner_iterations = {inner} for {steps} correction(s)")
    x = read_h5(out, "X")
    check_history(c, r, a, x, b)
    c.check(backward_error(a, x, b) <= 10 * U,
            f"numpy's normwise backward error of X: {backward_error(a, x, b) / U:.1f} u")
    # reference: numpy.linalg.solve, itself within kappa u of the truth; 10 kappa u apart
    # at most (the forward error bound kappa x backward error, Higham 2002, §7.1).
    ref = reference_solution(a, b)
    bound = 10 * k * U
    err = max(np.abs(flat(x) - flat(ref)).max(axis=0) / np.abs(flat(ref)).max(axis=0))
    c.check(err <= bound, f"||X - X_numpy||_inf / ||X_numpy||_inf = {err:.2e} > 10 kappa u = "
            f"{bound:.2e}")
    if x_true is not None:
        err = max(np.abs(flat(x) - flat(x_true)).max(axis=0) / np.abs(flat(x_true)).max(axis=0))
        c.check(err <= bound, f"||X - x_true||_inf / ||x_true||_inf = {err:.2e} > {bound:.2e}")


with suite.case("kappa = 1e9 (numpy-built, n=200, float64, 2 RHS): mixed gives way, "
                "mixed-krylov converges to numpy's X") as c:
    n = 200
    # Singular values geometric from 1 to 1e-9 (as 1e9 ... 1: the same up to a scale),
    # orthogonal factors from numpy's QR: kappa_2 = 1e9 by construction.
    a = conditioned_matrix(rng, n, np.float64, 1e9)
    x_true = random_matrix(rng, (n, 2), np.float64)
    b = a @ x_true
    within_factor(c, float(np.linalg.cond(a)), 1e9, 1.5, "numpy's kappa_2")
    beyond_classical(c, write_system(c, a, b), a, b, x_true)

with suite.case("Hilbert n=7 (kappa_inf ~ 9.85e8): mixed gives way, mixed-krylov converges") as c:
    path, a, b = generated_hilbert(c, 7)
    # kappa_inf(H_7) = 9.85e8 (recalled from memory), confirmed by numpy.
    within_factor(c, kappa_inf(a), 9.85e8, 1.01, "numpy's kappa_inf(H_7)")
    beyond_classical(c, path, a, b)


# ---------------------------------------------------------------------------------------------
# 4. Stopped with a checkpoint, resumed on another grid

def stopped_part_way(c, system, ckpt, out, killed):
    """A checkpointed mixed solve on 2 ranks, ended part-way: SIGKILL to every rank once it
    has committed a checkpoint (as on a node failure), or its time budget (exit 5)."""
    args = ["solve", system, "--out", out, "--precision", "mixed", "--block", 32,
            "--checkpoint", ckpt]
    if not killed:
        run = suite.run(*args, "--stop-after", "0.00001", ranks=2)
        c.require(not run.hung and run.code == STOPPED, f"expected exit 5: {run.describe()}")
        return
    job = Job(suite, args + ["--checkpoint-every", "0.00001"], 2)
    reached = Watch(ckpt).until(job, after_commits(1))
    job.kill()
    run = job.wait()
    c.require(reached, f"the run ended before a checkpoint: {run.describe()}")


def stop_and_resume(c, dtype, n, killed):
    a, b = conditioned_matrix(rng, n, dtype, 100), random_matrix(rng, (n, 2), dtype)
    system = write_system(c, a, b)
    run, whole, whole_report = solve(c, system, "mixed", "--block", 32, ranks=2, tag="whole")
    converged(c, run, whole_report, whole, "mixed")
    ckpt, out = c.dir / "ckpt", c.dir / "stopped.h5"
    stopped_part_way(c, system, ckpt, out, killed)
    c.check(not out.exists(), "X written by a run that stopped")
    narrow = np.complex64 if np.iscomplexobj(a) else np.float32
    with h5py.File(ckpt / "checkpoint.h5", "r") as f:  # reference: h5py reads the state
        work, pivots = f["work"][()], f["pivots"][()]
        kind, done = text(f.attrs["type"]), int(f.attrs["columns_done"])
    c.check(work.dtype == narrow and work.shape == (n, n),
            f"working matrix {work.shape} {work.dtype}, expected {n} x {n} {np.dtype(narrow)}")
    c.check(kind == np.dtype(narrow).name, f"checkpoint type = {kind!r}")
    c.require(0 < done < n, f"columns_done = {done}: not part-way")
    # The state is a partial LU factorization of A's single-precision copy, within the
    # rounding of single precision (getrf's layout; Higham 2002, Thm 9.3).
    problems = partial_lu_problems(a.astype(narrow), work, pivots)
    if np.iscomplexobj(a):
        # That check bounds |L| by 1, true of real pivoting; complex pivoting compares
        # |Re| + |Im| (gridlu's abs1, as LAPACK's icamax), and since |z| <= |Re| + |Im| <=
        # sqrt(2) |z|, a multiplier a / p has |a / p| <= sqrt(2) only. That bound instead.
        problems = [p for p in problems if " of L has an entry " not in p]
        worst = np.abs(np.tril(work[:, :done], -1)).max()
        c.check(worst <= math.sqrt(2) * (1 + 4 * U_SINGLE), f"multipliers reach |l| = {worst}")
    c.check(not problems, "working matrix: " + "; ".join(problems))
    # A double resume cannot continue single-precision factors.
    double_report = c.dir / "double-resume.json"
    run = suite.run("resume", ckpt, "--precision", "double", "--report", double_report, ranks=2)
    c.failed_with(run, USAGE, r"mixed")
    c.check(not out.exists() and not double_report.exists(), "output written on a usage error")
    c.check((ckpt / "checkpoint.h5").exists(), "the checkpoint went with the refused resume")
    resumed_report = c.dir / "resumed.json"
    run = suite.run("resume", ckpt, "--block", 48, "--report", resumed_report, ranks=3)
    r = converged(c, run, resumed_report, out, "mixed")
    c.check(r.get("grid") == [1, 3] and r.get("block") == 48,
            f"resumed on grid {r.get('grid')} block {r.get('block')}, expected [1, 3] and 48")
    x, x_whole = read_h5(out, "X"), read_h5(whole, "X")
    check_history(c, r, a, x, b)
    # reference: the uninterrupted run. Each X is within its own forward error bound
    # (infinity norm, per column) of the exact solution, so the two within the sum.
    bound = r["forward_error_bound"] + load(whole_report)["forward_error_bound"]
    err = max(np.abs(flat(x) - flat(x_whole)).max(axis=0) / np.abs(flat(x_whole)).max(axis=0))
    c.check(err <= bound, f"resumed X vs uninterrupted X: {err:.2e} > {bound:.2e}")
    err, tol = rel_diff(x, reference_solution(a, b)), rel_tol(a)
    c.check(err <= tol, f"||X - X_numpy||_F / ||X_numpy||_F = {err:.2e} > {tol:.2e}")


with suite.case("float64 n=2000 --block 32, 2 ranks, mixed killed (SIGKILL) after a checkpoint: "
                "float32 checkpoint, resume --precision double refused, resume on 3 ranks "
                "--block 48") as c:
    stop_and_resume(c, np.float64, 2000, killed=True)

with suite.case("complex128 n=700 --block 32, mixed stopped by --stop-after: complex64 "
                "checkpoint, resumed on 3 ranks") as c:
    stop_and_resume(c, np.complex128, 700, killed=False)


def holds_double_state(w, now):
    """The committed checkpoint is of the double factorization a fallback started."""
    try:
        with h5py.File(w.dir / "checkpoint.h5", "r") as f:
            return text(f.attrs["type"]) == "float64"
    except (OSError, KeyError):
        return False


with suite.case("float64 n=1200, kappa=1e12: mixed gives way, its double factorization is "
                "killed (SIGKILL) after a checkpoint and resumed on 3 ranks as double") as c:
    n = 1200
    a, b = conditioned_matrix(rng, n, np.float64, 1e12), random_matrix(rng, (n, 1), np.float64)
    system, ckpt, out = write_system(c, a, b), c.dir / "ckpt", c.dir / "x.h5"
    job = Job(suite, ["solve", system, "--out", out, "--precision", "mixed", "--block", 32,
                      "--checkpoint", ckpt, "--checkpoint-every", "0.00001"], 2)
    reached = Watch(ckpt).until(job, holds_double_state)
    job.kill()
    run = job.wait()
    c.require(reached, f"no double-precision checkpoint before the run ended: {run.describe()}")
    c.check(not out.exists(), "X written by a killed run")
    recorded = json.loads((ckpt / "job.json").read_text())
    c.check(recorded.get("precision") == "mixed" and recorded.get("fallback"),
            f"job.json: precision {recorded.get('precision')!r}, fallback "
            f"{recorded.get('fallback')!r}")
    info = suite.run("info", ckpt)
    c.check("gave way to double" in info.stdout, f"info does not say so:\n{info.stdout}")
    report = c.dir / "resumed.json"
    run = suite.run("resume", ckpt, "--block", 48, "--report", report, ranks=3)
    c.require(not run.hung and run.code == 0, f"resume: {run.describe()}")
    r = load(report)
    c.check(r.get("precision") == "mixed" and r.get("precision_used") == "double" and
            r.get("fallback") == recorded.get("fallback"),
            f"report: precision {r.get('precision')!r}, used {r.get('precision_used')!r}, "
            f"fallback {r.get('fallback')!r}")
    # reference: numpy.linalg.solve; a double solve of kappa = 1e12 is good to about kappa u
    err, tol = rel_diff(read_h5(out, "X"), reference_solution(a, b)), 1e12 * U * 100
    c.check(err <= tol, f"||X - X_numpy|| / ||X_numpy|| = {err:.1e} > {tol:.1e}")


# ---------------------------------------------------------------------------------------------
# 5. Usage errors

def refused(c, args, mention, *never, ranks=1):
    """exit 2, one 'gridlu: error:' line matching `mention`, none of `never` written."""
    run = suite.run(*args, ranks=ranks)
    c.failed_with(run, USAGE, mention)
    for p in never:
        c.check(not Path(p).exists(), f"{Path(p).name} written on a usage error")


with suite.case("usage errors: mixed on float32/complex64, with --save-factors, --factors, "
                "--refine: exit 2, nothing written") as c:
    n = 40
    out, report, lu = c.dir / "x.h5", c.dir / "r.json", c.dir / "lu.h5"
    for dtype in (np.float32, np.complex64):
        name = np.dtype(dtype).name
        path = write_system(c, random_matrix(rng, (n, n), dtype), random_matrix(rng, (n, 1), dtype),
                            f"{name}.h5")
        for precision in ("mixed", "mixed-krylov"):
            refused(c, ["solve", path, "--out", out, "--report", report, "--precision", precision],
                    name, out, report)
    a, b = conditioned_matrix(rng, n, np.float64), random_matrix(rng, (n, 1), np.float64)
    path = write_system(c, a, b)
    refused(c, ["solve", path, "--out", out, "--report", report, "--precision", "mixed",
                "--save-factors", lu], r"--save-factors", out, report, lu)
    refused(c, ["solve", path, "--out", out, "--report", report, "--precision", "mixed",
                "--refine"], r"--refine", out, report)
    saved = c.dir / "saved-lu.h5"
    c.succeeded(suite.run("solve", path, "--out", c.dir / "x0.h5", "--save-factors", saved))
    refused(c, ["solve", path, "--out", out, "--report", report, "--precision", "mixed-krylov",
                "--factors", saved], r"--factors", out, report)


# ---------------------------------------------------------------------------------------------
# 6. demo and bench

with suite.case("demo --precision mixed --n 300 --rhs 2 and bench --precision mixed --n 400, "
                "2 ranks: reports carry the precision; backward errors of double's class") as c:
    report = c.dir / "demo.json"
    run = suite.run("demo", "random", "--n", 300, "--rhs", 2, "--block", 32, "--precision", "mixed",
                    "--report", report, ranks=2)
    c.succeeded(run)
    r = load(report)
    for key, want in (("precision", "mixed"), ("precision_used", "mixed"), ("fallback", "")):
        c.check(r.get(key) == want, f"demo: {key} = {r.get(key)!r}")
    # Double's class as in backward_same_class; a single-precision answer would sit near
    # u_single = 5e8 u.
    eta = r.get("normwise_backward_error", 1)
    c.check(eta <= double_class(300), f"demo: normwise backward error {eta / U:.1f} u")
    report = c.dir / "bench.json"
    n = 400
    run = suite.run("bench", "--n", n, "--block", 32, "--precision", "mixed", "--report", report,
                    ranks=2)
    c.succeeded(run)
    r = load(report)
    for key, want in (("precision", "mixed"), ("precision_used", "mixed"), ("fallback", "")):
        c.check(r.get(key) == want, f"bench: {key} = {r.get(key)!r}")
    eta = r.get("normwise_backward_error", 1)
    c.check(eta <= double_class(n), f"bench: normwise backward error {eta / U:.1f} u")


# ---------------------------------------------------------------------------------------------
# 7. Memory

with suite.case("memory, float64 n=3000, 1 rank: mixed's peak exceeds double's by at most "
                "0.75 of A (its single-precision copy is 0.5), not a second double copy") as c:
    n = 3000
    a, b = conditioned_matrix(rng, n, np.float64, 10), random_matrix(rng, (n, 1), np.float64)
    system = write_system(c, a, b)
    peaks = {}
    for precision in ("double", "mixed"):
        run, out, report = solve(c, system, precision)
        c.succeeded(run)
        peaks[precision] = load(report).get("peak_resident_bytes_rank0")
    c.require(all(isinstance(v, (int, float)) and v > n * n * 8 for v in peaks.values()),
              f"peak_resident_bytes_rank0 {peaks}: expected more than A's {n * n * 8} bytes")
    extra, copy = peaks["mixed"] - peaks["double"], n * n * 8
    # The single-precision copy is half of A (4 bytes an entry instead of 8, IEEE 754).
    c.check(extra <= 0.75 * copy, f"mixed's peak exceeds double's by {extra / copy:.2f} of A's "
            f"{copy} bytes (peaks {peaks})")

suite.finish()
