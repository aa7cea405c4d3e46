#!/usr/bin/python3
"""Mixed precision against double: the time to X of `gridlu bench --precision mixed` and
`--precision double`, alternating the runs so that drifts of the machine hit both alike;
prints medians, their ratio, the single/double GEMM rate ratio measured in the same mixed
runs (the limit of the speed-up) and the fraction of it reached, and the final normwise
backward errors.

    /usr/bin/python3 tools/bench_mixed.py [--sizes 1000 2000 4096 8192] [--types float64
        complex128] [--rounds 3] [--repeat 2] [--build build] [--grid 1x2] [--krylov]

Each process times `--repeat` solves of one right-hand side; the medians are over all of
them. Double's time to X is its factorization and one solve; mixed's is the
single-precision copy, its factorization and the refinement in double.
"""
import argparse
import json
import os
import statistics
import subprocess
import tempfile


def bench(cmd, report):
    subprocess.run(cmd + ["--report", report], check=True, capture_output=True, text=True)
    with open(report) as f:
        return json.load(f)


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sizes", type=int, nargs="+", default=[1000, 2000, 4096, 8192])
    p.add_argument("--types", nargs="+", default=["float64", "complex128"])
    p.add_argument("--rounds", type=int, default=3)
    p.add_argument("--repeat", type=int, default=2, help="solves per process")
    p.add_argument("--ranks", type=int, default=2)
    p.add_argument("--grid")
    p.add_argument("--build", default="build")
    p.add_argument("--krylov", action="store_true", help="also time --precision mixed-krylov")
    args = p.parse_args()
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    launch = [os.path.join(root, "tools", "launch"), "-n", str(args.ranks)]
    gridlu = os.path.join(args.build, "gridlu")
    grid = ["--grid", args.grid or f"1x{args.ranks}"]
    modes = ["double", "mixed"] + (["mixed-krylov"] if args.krylov else [])
    print("| type | n | double s | " + " | ".join(f"{m} s" for m in modes[1:]) +
          " | speed-up | SGEMM/DGEMM | fraction | backward error / u (" + ", ".join(modes) +
          ") | corrections |")
    print("|" + "---|" * (8 + len(modes) - 1))
    with tempfile.TemporaryDirectory() as tmp:
        report = os.path.join(tmp, "r.json")
        for t in args.types:
            u = 2.0**-53
            for n in args.sizes:
                times = {m: [] for m in modes}
                errors, gemm_ratio, corrections = {}, [], {}
                for _ in range(args.rounds):
                    for m in modes:
                        r = bench(launch + [gridlu, "bench", "--n", str(n), "--type", t,
                                            "--repeat", str(args.repeat), "--precision", m,
                                            *grid], report)
                        times[m] += r["times"]["to_solution_runs"]
                        errors[m] = r["normwise_backward_error"] / u
                        corrections[m] = r["refinement_iterations"]
                        if r["precision_used"] != m:
                            raise SystemExit(f"{m} at n = {n} gave way to double: {r['fallback']}")
                        if m != "double":
                            gemm_ratio.append(r["narrow_gemm_gflops"] / r["gemm_gflops"])
                med = {m: statistics.median(v) for m, v in times.items()}
                speedup = med["double"] / med["mixed"]
                limit = statistics.median(gemm_ratio)
                print(f"| {t} | {n} | {med['double']:.3f} | " +
                      " | ".join(f"{med[m]:.3f}" for m in modes[1:]) +
                      f" | {speedup:.2f} | {limit:.2f} | {speedup / limit:.2f} | " +
                      ", ".join(f"{errors[m]:.1f}" for m in modes) + " | " +
                      ", ".join(str(corrections[m]) for m in modes[1:]) + " |", flush=True)


if __name__ == "__main__":
    main()
