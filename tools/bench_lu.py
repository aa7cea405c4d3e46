#!/usr/bin/python3
"""The factorization benchmark: gridlu against the GEMM bound of the same cores and
against OpenBLAS's own threaded LU, alternating the runs so that drifts of the machine hit
all alike; prints medians and ratios.

    /usr/bin/python3 tools/bench_lu.py [--sizes 4096 8192] [--rounds 3] [--repeat 3]
        [--build build] [--grids 1x2 2x1] [--variant "--block 128" --variant "--lookahead 2"]

Each round starts every program once and each factors `--repeat` times in that process.
The medians are over all factorizations after each process's first ("warm": buffers and
pages in place, as in a long job), and separately over the first ones ("first": what a
single solve per process pays). Each --variant is a set of extra `gridlu bench` options,
run in the same rounds. OpenBLAS picks its kernels for the CPU unless OPENBLAS_CORETYPE
says otherwise; the script prints the build line that both gridlu and the reference ran.
"""
import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile


def run_json(cmd, report=None):
    out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
    if report is None:
        return json.loads(out.strip().splitlines()[-1])
    with open(report) as f:
        return json.load(f)


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sizes", type=int, nargs="+", default=[4096, 8192])
    p.add_argument("--rounds", type=int, default=3)
    p.add_argument("--repeat", type=int, default=3, help="factorizations per process")
    p.add_argument("--ranks", type=int, default=2)
    p.add_argument("--block", type=int)
    p.add_argument("--build", default="build")
    p.add_argument("--grids", nargs="+")
    p.add_argument("--variant", action="append", help="extra gridlu bench options")
    args = p.parse_args()
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    gridlu = os.path.join(args.build, "gridlu")
    reference = os.path.join(args.build, "reference_lu")
    launch = [os.path.join(root, "tools", "launch"), "-n", str(args.ranks)]
    grids = args.grids or [f"1x{args.ranks}", f"{args.ranks}x1"]
    block = ["--block", str(args.block)] if args.block else []
    variants = args.variant or [""]
    cases = [(g, v) for g in grids for v in variants]
    with tempfile.TemporaryDirectory() as tmp:
        report = os.path.join(tmp, "r.json")
        for n in args.sizes:
            flops = 2 * n**3 / 3 * 1e-9  # of a real LU, in GFLOP
            gemm, lapack, ours = [], [], {c: [] for c in cases}
            kernels = set()  # OpenBLAS's build line names the kernels it chose for this CPU
            for _ in range(args.rounds):
                for g, v in cases:
                    r = run_json(launch + [gridlu, "bench", "--n", str(n), "--grid", g, *block,
                                           "--repeat", str(args.repeat), *v.split(),
                                           "--report", report], report)
                    ours[(g, v)].append(r["times"]["factor_runs"])
                    gemm.append(r["gemm_gflops"])
                    kernels.add(r["versions"]["blas"])
                ref_run = run_json([reference, str(n), str(args.ranks), "float64",
                                    str(args.repeat)])
                lapack.append(ref_run["runs"])
                kernels.add(ref_run["blas"])

            def rates(runs):  # GFLOP/s medians: (warm, first)
                warm = [flops / t for rs in runs for t in rs[1:]] or [flops / rs[0] for rs in runs]
                return statistics.median(warm), statistics.median(flops / rs[0] for rs in runs)

            if len(kernels) != 1:
                sys.exit(f"gridlu and the reference ran different BLAS builds: {kernels}")
            bound = statistics.median(gemm)
            print(f"BLAS: {kernels.pop()}")
            ref = rates(lapack)
            print(f"n = {n}: GEMM bound {bound:.1f} GFLOP/s; OpenBLAS LU ({args.ranks} threads) "
                  f"warm {ref[0]:.1f} = {ref[0] / bound:.3f} of the bound, "
                  f"first {ref[1]:.1f} = {ref[1] / bound:.3f}")
            for g, v in cases:
                m = rates(ours[(g, v)])
                print(f"  gridlu {g} {v}: warm {m[0]:.1f} GFLOP/s = {m[0] / bound:.3f} of the bound, "
                      f"{m[0] / ref[0]:.3f} x OpenBLAS LU; first {m[1]:.1f} = {m[1] / bound:.3f}, "
                      f"{m[1] / ref[1]:.3f} x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
