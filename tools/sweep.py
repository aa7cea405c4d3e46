#!/usr/bin/python3
"""Scaling studies: `gridlu bench` over rank counts, the reports collected in one folder.

    python3 tools/sweep.py strong --n N --ranks 1,2,4 --out DIR [options]
    python3 tools/sweep.py weak --memory-per-rank 512M --ranks 1,2,4 --out DIR [options]

options: --type T  --block NB  --lookahead D  --repeat K (default 3)
         --launcher mpiexec|srun (or a path to one; default mpiexec)  --launcher-args "..."
         --gridlu PATH (default build/gridlu)  --calibration F.json  --resume

Each point runs `LAUNCHER -n R [LAUNCHER-ARGS] GRIDLU bench --n N --type T [--block NB]
[--lookahead D] --repeat K --report DIR/bench-rR-nN.json`. Strong scaling keeps N; weak
scaling keeps A's share per rank at SIZE bytes: N = floor(sqrt(R * SIZE / element bytes)),
not rounded to the block (the share then stays under SIZE by less than (2N+1)/N^2 of it).
SIZE as gridlu takes it: K, M, G, T are powers of 1024, kB, MB, GB, TB of 1000. Nothing
is oversubscribed unless --launcher-args asks (e.g. "--oversubscribe" for mpiexec);
timings are only meaningful with one rank per core. Inside a Slurm allocation use --launcher srun.

With --calibration, each point also gets the model's prediction from `gridlu plan --json`
for the grid and block the bench used.

DIR/sweep.json lists the machine, the command lines and every point (with the 1-minute
load average before it ran, as a warning of a busy machine); it is rewritten
(whole: a temporary file renamed) after each point, so a failed point stops the sweep and
keeps what was collected. An existing DIR with anything in it is refused; with --resume the
sweep continues in it, skipping the points already in sweep.json, provided the settings are
the same. A report is never written over.

Exit status: 0 done, 1 a point failed, 2 usage (bad options, no `gridlu plan` for
--calibration, settings that differ from the sweep resumed), 6 output refused.
"""
import argparse
import datetime
import json
import math
import os
import platform
import re
import shlex
import shutil
import subprocess
import sys
import tempfile

ELEMENT_BYTES = {"float32": 4, "float64": 8, "complex64": 8, "complex128": 16}
# Settings a resumed sweep must share with the one it continues.
SETTINGS = ("kind", "type", "n", "memory_per_rank_bytes", "block", "lookahead", "repeat",
            "calibration")
PLAN_MEMORY = "1T"  # per node, for the model: large enough never to be the limit
UMASK = os.umask(0o22)
os.umask(UMASK)
SIZE = re.compile(r"([0-9.e+-]+)([kmgt]?)(b|ib)?")


class Refusal(Exception):
    def __init__(self, code, message):
        super().__init__(message)
        self.code = code


def parse_size(text):
    """Bytes in a size as gridlu reads one: a number, then nothing or B, or K/M/G/T with an
    optional iB (powers of 1024), or kB/MB/GB/TB (powers of 1000)."""
    m = SIZE.fullmatch(text.strip().lower())
    try:
        base = 1000 if m[3] == "b" and m[2] else 1024
        value = float(m[1]) * base ** ("kmgt".find(m[2]) + 1 if m[2] else 0)
    except (TypeError, ValueError):  # no match, or not a number
        value = 0
    if not value >= 1 or (m and m[3] == "ib" and not m[2]):
        raise argparse.ArgumentTypeError(f"not a memory size: {text!r} (e.g. 512M, 2G, 1.5GiB)")
    return int(value)


def rank_list(text):
    try:
        ranks = sorted({int(r) for r in text.split(",")})
    except ValueError:
        ranks = []
    if not ranks or ranks[0] < 1:
        raise argparse.ArgumentTypeError(f"not a list of rank counts: {text!r} (e.g. 1,2,4)")
    return ranks


def parse_args():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("kind", choices=["strong", "weak"])
    p.add_argument("--n", type=int, help="strong: order of the matrix")
    p.add_argument("--memory-per-rank", metavar="SIZE", help="weak: A's bytes per rank, e.g. 512M")
    p.add_argument("--ranks", type=rank_list, required=True, help="rank counts, e.g. 1,2,4")
    p.add_argument("--type", default="float64", choices=sorted(ELEMENT_BYTES))
    p.add_argument("--block", type=int)
    p.add_argument("--lookahead", type=int)
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--launcher", default="mpiexec", help="mpiexec or srun, or a path to one")
    p.add_argument("--launcher-args", default="", help='e.g. "--oversubscribe" or "--exact"')
    p.add_argument("--gridlu", default="build/gridlu")
    p.add_argument("--calibration", help="calibration file for `gridlu plan`")
    p.add_argument("--out", required=True, help="folder of the results")
    p.add_argument("--resume", action="store_true", help="continue the sweep in --out")
    argv = sys.argv[1:]
    if "--launcher-args" in argv[:-1]:  # its value may look like an option: --oversubscribe
        i = argv.index("--launcher-args")
        argv[i:i + 2] = [f"--launcher-args={argv[i + 1]}"]
    a = p.parse_args(argv)
    try:
        a.memory_bytes = a.memory_per_rank and parse_size(a.memory_per_rank)
    except argparse.ArgumentTypeError as e:
        p.error(str(e))
    if (a.kind == "strong") != (a.n is not None) or (a.kind == "weak") != bool(a.memory_per_rank):
        p.error("strong takes --n, weak takes --memory-per-rank")
    if a.n is not None and a.n < 1 or a.repeat < 1 or (a.block or 1) < 1 or (a.lookahead or 0) < 0:
        p.error("--n, --repeat and --block must be at least 1, --lookahead at least 0")
    return a


def order_for(args, ranks):
    if args.kind == "strong":
        return args.n
    return math.isqrt(ranks * args.memory_bytes // ELEMENT_BYTES[args.type])


def machine():
    cpu = "unknown"
    with open("/proc/cpuinfo") as f:
        for line in f:
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    return {"hostname": platform.node(), "cpu_model": cpu, "cores": os.cpu_count()}


def now():
    return datetime.datetime.now().astimezone().isoformat(timespec="seconds")


def write_whole(path, text):
    """Write text to path through a temporary file in the same folder, then rename."""
    fd, tmp = tempfile.mkstemp(dir=os.path.dirname(path), prefix=".sweep-")
    try:
        os.fchmod(fd, 0o666 & ~UMASK)  # as an ordinary new file, not mkstemp's 0600
        with os.fdopen(fd, "w") as f:
            f.write(text)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        os.unlink(tmp)
        raise


def require_tools(args):
    if not (os.path.isfile(args.gridlu) and os.access(args.gridlu, os.X_OK)):
        raise Refusal(2, f"no gridlu executable at {args.gridlu} (build it, or give --gridlu)")
    if shutil.which(args.launcher) is None:
        raise Refusal(2, f"launcher {args.launcher!r} not found")
    if args.calibration is None:
        return
    if not os.path.isfile(args.calibration):
        raise Refusal(2, f"no calibration file {args.calibration}")
    listing = subprocess.run([args.gridlu, "--help"], capture_output=True, text=True).stdout
    if not any(line.split()[:1] == ["plan"] for line in listing.splitlines()):
        raise Refusal(2, f"--calibration needs `gridlu plan`, which {args.gridlu} does not have "
                         "(build a gridlu that has it, or sweep without --calibration)")


def settings(args):
    return {"kind": args.kind, "type": args.type, "n": args.n,
            "memory_per_rank": args.memory_per_rank, "memory_per_rank_bytes": args.memory_bytes,
            "block": args.block, "lookahead": args.lookahead, "repeat": args.repeat,
            "calibration": args.calibration}


def open_sweep(args, invocation):
    """The sweep record to continue: a new one, or with --resume the one in DIR."""
    path = os.path.join(args.out, "sweep.json")
    if os.path.exists(args.out) and not os.path.isdir(args.out):
        raise Refusal(6, f"{args.out} exists and is not a folder")
    if os.path.isdir(args.out) and os.listdir(args.out) and not args.resume:
        raise Refusal(6, f"{args.out} already holds results; choose another --out, or "
                         "--resume to continue the sweep there")
    os.makedirs(args.out, exist_ok=True)
    if not os.path.exists(path):
        if os.listdir(args.out):
            raise Refusal(6, f"{args.out} holds files but no sweep.json; nothing to resume")
        return {**settings(args), "machine": machine(), "date": now(), "commands": [invocation],
                "points": []}
    with open(path) as f:
        sweep = json.load(f)
    mine = settings(args)
    differ = [k for k in SETTINGS if sweep.get(k) != mine[k]]
    if differ:
        raise Refusal(2, "--resume with other settings than the sweep in " + args.out + ": " +
                      ", ".join(f"{k} {sweep.get(k)} there, {mine[k]} now" for k in differ))
    if sweep["machine"]["hostname"] != invocation["hostname"]:
        print(f"sweep: warning: resuming on {invocation['hostname']}, begun on "
              f"{sweep['machine']['hostname']}", file=sys.stderr)
    sweep["commands"].append(invocation)
    return sweep


def bench_argv(args, ranks, n, report):
    argv = [args.launcher, "-n", str(ranks), *shlex.split(args.launcher_args), args.gridlu,
            "bench", "--n", str(n), "--type", args.type]
    if args.block:
        argv += ["--block", str(args.block)]
    if args.lookahead is not None:
        argv += ["--lookahead", str(args.lookahead)]
    return argv + ["--repeat", str(args.repeat), "--report", report]


def failure(what, run):
    tail = (run.stderr.strip() or run.stdout.strip()).splitlines()[-5:]
    return f"{what} failed (exit {run.returncode})" + "".join(f"\n  | {t}" for t in tail)


def run_bench(args, ranks, n, name):
    """Runs one point; the report goes to a private folder in DIR and is linked into place
    only when whole, under a name that must not exist yet."""
    final = os.path.join(args.out, name)
    if os.path.exists(final):
        raise Refusal(6, f"{final} exists but is not in sweep.json; move it away first")
    stage = tempfile.mkdtemp(dir=args.out, prefix=".sweep-")
    try:
        argv = bench_argv(args, ranks, n, os.path.join(stage, name))
        run = subprocess.run(argv, capture_output=True, text=True)
        if run.returncode != 0:
            raise Refusal(1, failure(f"point {ranks} rank(s), n = {n}", run))
        with open(os.path.join(stage, name)) as f:
            report = json.load(f)
        os.link(os.path.join(stage, name), final)
    finally:
        shutil.rmtree(stage)
    return report, argv[:-1] + [final]


def run_plan(args, ranks, report):
    p, q = report["grid"]
    argv = [args.gridlu, "plan", "--json", "--n", str(report["n"]), "--type", args.type,
            "--nodes", "1", "--cores-per-node", str(ranks), "--mem-per-node", PLAN_MEMORY,
            "--grid", f"{p}x{q}", "--block", str(report["block"]),
            "--lookahead", str(report["lookahead"]), "--calibration", args.calibration]
    run = subprocess.run(argv, capture_output=True, text=True)
    if run.returncode != 0:
        raise Refusal(1, failure(f"the model for {ranks} rank(s), n = {report['n']}", run))
    try:
        plan = json.loads(run.stdout)
        return {"predicted_seconds": float(plan["predicted_seconds"]),
                "predicted_phases": plan.get("phases"), "plan_command": shlex.join(argv)}
    except (ValueError, KeyError, TypeError) as e:
        raise Refusal(1, f"`{shlex.join(argv)}` printed no predicted_seconds in JSON ({e})")


def sweep_point(args, ranks, n):
    name = f"bench-r{ranks}-n{n}.json"
    load = os.getloadavg()[0]  # others' work on the machine skews the timing
    report, argv = run_bench(args, ranks, n, name)
    point = {"ranks": ranks, "n": n, "grid": report["grid"], "block": report["block"],
             "lookahead": report["lookahead"], "report": name, "command": shlex.join(argv),
             "factor_seconds": report["times"]["factor"], "gflops": report["gflops"],
             "load_before": load}
    if args.calibration:
        point.update(run_plan(args, ranks, report))
    return point, report["versions"]["blas"]


def run(args, invocation):
    require_tools(args)
    sweep = open_sweep(args, invocation)
    path = os.path.join(args.out, "sweep.json")
    write_whole(path, json.dumps(sweep, indent=2) + "\n")
    for ranks in args.ranks:
        n = order_for(args, ranks)
        if any(p["ranks"] == ranks and p["n"] == n for p in sweep["points"]):
            print(f"sweep: {ranks} rank(s), n = {n}: in sweep.json already, skipped")
            continue
        print(f"sweep: {ranks} rank(s), n = {n} ...", flush=True)
        point, blas = sweep_point(args, ranks, n)
        sweep["machine"].setdefault("blas", blas)
        sweep["points"] = sorted(sweep["points"] + [point], key=lambda p: p["ranks"])
        write_whole(path, json.dumps(sweep, indent=2) + "\n")
        predicted = (f", model {point['predicted_seconds']:.3f} s"
                     if "predicted_seconds" in point else "")
        print(f"       factor {point['factor_seconds']:.3f} s, {point['gflops']:.2f} GFLOP/s, "
              f"grid {point['grid'][0]}x{point['grid'][1]}{predicted} "
              f"(load {point['load_before']:.1f} before)")
    print(f"sweep: {len(sweep['points'])} point(s) in {path}")


def main():
    args = parse_args()
    invocation = {"date": now(), "hostname": platform.node(), "argv": sys.argv,
                  "command": shlex.join([sys.executable, *sys.argv])}
    args.gridlu = os.path.abspath(args.gridlu)
    if args.calibration:
        args.calibration = os.path.abspath(args.calibration)
    try:
        run(args, invocation)
    except Refusal as e:
        where = os.path.join(args.out, "sweep.json")
        kept = f"\nsweep: the points collected so far are in {where}; --resume continues" \
            if e.code == 1 and os.path.exists(where) else ""
        print(f"sweep: error: {e}{kept}", file=sys.stderr)
        sys.exit(e.code)


if __name__ == "__main__":
    main()
