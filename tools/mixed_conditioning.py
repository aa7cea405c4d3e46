#!/usr/bin/python3
"""Which condition numbers each --precision handles: solves systems of known condition with
`gridlu solve --precision double`, `mixed` and `mixed-krylov` and prints a markdown table of
what each mode did and how accurate its X is.

    /usr/bin/python3 tools/mixed_conditioning.py --gridlu build/gridlu [--n 400] [--ranks 2]
        [--types float64 complex128] [--mpiexec mpiexec] [--block NB] [--seed 1]

For kappa = 1e2, 1e4, ..., 1e16, A = Q1 diag(sigma) Q2^H with sigma geometric over
[1, kappa] and Q1, Q2 from numpy's QR of random matrices; B = A x_true for a random x_true.
The columns: kappa_2 of A as numpy computes it; the precision gridlu used (double after a
fallback); the corrections applied and, for mixed-krylov, the GMRES steps they took; the
normwise backward error ||B - A X||_inf / (||A||_inf ||X||_inf + ||B||_inf) over u =
2^-53, recomputed by numpy from the X gridlu wrote (worst column); and
||X - x_true||_inf / ||x_true||_inf (worst column), which a backward stable solve keeps
near kappa u. Needs numpy and h5py (Debian: python3-numpy, python3-h5py); run as root, it
sets the consent variables Open MPI asks for.
"""
import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import h5py
import numpy as np

# The tests' generator of systems of known condition, so that both build the same kind.
sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests" / "cli"))
from harness import backward_error, conditioned_matrix, random_matrix  # noqa: E402

U = float(np.finfo(np.float64).eps) / 2
MODES = ("double", "mixed", "mixed-krylov")


def solve(args, system, mode, workdir):
    """Runs gridlu solve; (report dict, X) or (None, reason) when it did not exit 0."""
    out, report = workdir / f"{mode}.h5", workdir / f"{mode}.json"
    cmd = [args.mpiexec, "-q", "-n", str(args.ranks), "--oversubscribe", args.gridlu, "solve",
           str(system), "--out", str(out), "--report", str(report), "--precision", mode,
           "--force", "--quiet"]
    if args.block:
        cmd += ["--block", str(args.block)]
    run = subprocess.run(cmd, capture_output=True, text=True)
    if run.returncode != 0:
        lines = [s for s in run.stderr.splitlines() if s.startswith("gridlu:")]
        return None, f"exit {run.returncode}" + (f": {lines[0]}" if lines else "")
    with h5py.File(out, "r") as f:
        x = f["X"][()]
    return json.loads(report.read_text()), x


def worst_relative_error(x, x_true):
    x, x_true = x.reshape(len(x), -1), x_true.reshape(len(x_true), -1)
    return float((np.abs(x - x_true).max(axis=0) / np.abs(x_true).max(axis=0)).max())


def rows_for(args, dtype, rng, workdir):
    for exponent in range(2, 17, 2):
        a = conditioned_matrix(rng, args.n, dtype, 10.0 ** exponent)
        x_true = random_matrix(rng, (args.n, args.rhs), dtype)
        b = a @ x_true
        system = workdir / "system.h5"
        with h5py.File(system, "w") as f:
            f["A"], f["B"] = a, b
        kappa = float(np.linalg.cond(a))
        for mode in MODES:
            report, x = solve(args, system, mode, workdir)
            if report is None:
                yield [dtype.__name__, f"{kappa:.1e}", mode, x, "", "", "", ""]
                continue
            used = report.get("precision_used", "?")
            if report.get("fallback"):
                used += f" ({report['fallback']})"
            mixed_ran = mode != "double"
            corrections = str(report.get("refinement_iterations", "")) if mixed_ran else ""
            gmres = report.get("refinement_inner_iterations")
            steps = str(sum(gmres)) if mode == "mixed-krylov" and gmres is not None else ""
            eta = backward_error(a, x, b) / U
            yield [dtype.__name__, f"{kappa:.1e}", mode, used, corrections, steps, f"{eta:.2g}",
                   f"{worst_relative_error(x, x_true):.1e}"]


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--gridlu", required=True, help="the gridlu executable")
    p.add_argument("--mpiexec", default="mpiexec")
    p.add_argument("--n", type=int, default=400)
    p.add_argument("--rhs", type=int, default=1)
    p.add_argument("--ranks", type=int, default=2)
    p.add_argument("--block", type=int, help="block size (default: gridlu's)")
    p.add_argument("--types", nargs="+", default=["float64"], choices=["float64", "complex128"])
    p.add_argument("--seed", type=int, default=1)
    args = p.parse_args()
    args.gridlu = os.path.abspath(args.gridlu)
    # Open MPI refuses root without these; harmless otherwise.
    os.environ.setdefault("OMPI_ALLOW_RUN_AS_ROOT", "1")
    os.environ.setdefault("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
    rng = np.random.default_rng(args.seed)
    head = ["type", "κ₂ (numpy)", "--precision", "used", "corrections", "GMRES steps",
            "backward error / u", "‖X − x‖∞ / ‖x‖∞"]
    print(f"n = {args.n}, {args.rhs} right-hand side(s), {args.ranks} rank(s), "
          f"u = 2⁻⁵³ ≈ {U:.2g}; backward error and error recomputed by numpy from X.\n")
    print("| " + " | ".join(head) + " |")
    print("|" + "---|" * len(head))
    with tempfile.TemporaryDirectory(prefix="gridlu-conditioning-") as tmp:
        for name in args.types:
            for row in rows_for(args, getattr(np, name), rng, Path(tmp)):
                print("| " + " | ".join(row) + " |", flush=True)


if __name__ == "__main__":
    main()
