"""The scaling tools end to end: tools/sweep.py runs `gridlu bench` at small sizes on 1 and
2 ranks, tools/plot_scaling.py draws the result. The sweep's record is held to the bench
reports read here with json, the weak-scaling orders to the share of A per rank they are
meant to keep, the plotted efficiency to one computed here from the reports, and the PNG
to its format (read back with matplotlib). Stand-ins for gridlu (`plan`, a failing point)
and for srun are small scripts written by the test.
"""
import json
import os
import shlex
import statistics
import struct
import subprocess
import sys
import zlib
from pathlib import Path

import matplotlib.image

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "cli"))
from harness import Suite  # noqa: E402

TOOLS = Path(__file__).resolve().parents[2] / "tools"
suite = Suite(__doc__.splitlines()[0])
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG specification, section 5.2)


def tool(name, *args):
    argv = [sys.executable, str(TOOLS / name), *map(str, args)]
    return subprocess.run(argv, capture_output=True, text=True, cwd=suite.root, timeout=300)


def sweep(*args, gridlu=None, launcher=None):
    return tool("sweep.py", *args, "--gridlu", gridlu or suite.gridlu,
                "--launcher", launcher or suite.mpiexec, "--repeat", 2)


def script(path, text):
    path.write_text(text)
    path.chmod(0o755)
    return path


def load(directory):
    with open(directory / "sweep.json") as f:
        record = json.load(f)
    reports = {}
    for p in record["points"]:
        with open(directory / p["report"]) as f:
            reports[p["report"]] = json.load(f)
    return record, reports


def files(directory):
    """{name: contents} of everything in the folder (None for a folder)."""
    return {p.name: p.read_bytes() if p.is_file() else None for p in directory.iterdir()}


def png_text(path):
    """The PNG's tEXt chunks as {keyword: text}, read chunk by chunk (PNG specification,
    sections 5.3 and 11.3.4.3), each chunk's CRC checked."""
    data = path.read_bytes()
    chunks, at = {}, 8
    while at < len(data):
        length, kind = struct.unpack(">I4s", data[at:at + 8])
        body = data[at + 8:at + 8 + length]
        crc = struct.unpack(">I", data[at + 8 + length:at + 12 + length])[0]
        if crc != zlib.crc32(kind + body):
            raise ValueError(f"bad CRC in a {kind} chunk")
        if kind == b"tEXt":
            key, text = body.split(b"\0", 1)
            chunks[key.decode("latin-1")] = text.decode("latin-1")
        at += 12 + length
    return chunks


def ok(c, run, what):
    c.require(run.returncode == 0, f"{what}: exit {run.returncode}\n{run.stderr}")


def check_against_reports(c, directory, ranks):
    """Every rank count has its point, and each point says what its report says."""
    record, reports = load(directory)
    c.require([p["ranks"] for p in record["points"]] == ranks, f"points: {record['points']}")
    for p in record["points"]:
        r = reports[p["report"]]
        c.check(p["report"] == f"bench-r{p['ranks']}-n{p['n']}.json", f"name {p['report']}")
        c.check(r["command"] == "bench" and r["ranks"] == p["ranks"] and r["n"] == p["n"],
                f"{p['report']}: ranks {r['ranks']}, n {r['n']} against {p}")
        c.check(r["grid"] == p["grid"] and r["grid"][0] * r["grid"][1] == p["ranks"],
                f"grid {p['grid']} against the report's {r['grid']}")
        c.check(r["block"] == p["block"] and r["lookahead"] == p["lookahead"], f"block of {p}")
        c.check(p["factor_seconds"] == r["times"]["factor"] and p["gflops"] == r["gflops"],
                f"times of {p} against the report's {r['times']['factor']}, {r['gflops']}")
        c.check(r["times"]["factor"] == statistics.median(r["times"]["factor_runs"]) and
                len(r["times"]["factor_runs"]) == 2, f"runs {r['times']['factor_runs']}")
        argv = shlex.split(p["command"])
        c.check(argv[1:3] == ["-n", str(p["ranks"])] and "--oversubscribe" not in argv,
                f"launch line {p['command']}")
    m = record["machine"]
    c.check(m["cores"] == os.cpu_count() and m["cpu_model"] and m["hostname"], f"machine {m}")
    return record, reports


def expected_efficiency(record, reports):
    """Rate per rank against 1 rank's, from the reports: T1 / (R T_R) when N is the same,
    scaled by the work N^3 otherwise (the definition documented in plot_scaling.py)."""
    pts = sorted(record["points"], key=lambda p: p["ranks"])
    t = [reports[p["report"]]["times"]["factor"] for p in pts]
    n = [reports[p["report"]]["n"] for p in pts]
    return [(n[i] / n[0]) ** 3 * t[0] / (p["ranks"] * t[i]) for i, p in enumerate(pts)]


def check_png(c, path, record, reports):
    data = path.read_bytes()
    c.check(data[:8] == PNG_MAGIC, f"{path.name} does not start with the PNG signature")
    c.check(len(data) > 30_000, f"{path.name} has only {len(data)} bytes")
    height, width = matplotlib.image.imread(path).shape[:2]
    c.check(width > 1000 and 300 < height < width, f"{path.name} is {width}x{height}")
    drawn = json.loads(png_text(path)["gridlu-scaling"])
    want = expected_efficiency(record, reports)
    c.check(len(drawn["efficiency"]) == len(want) and
            all(abs(a - b) <= 1e-12 * b for a, b in zip(drawn["efficiency"], want)),
            f"plotted efficiency {drawn['efficiency']}, from the reports {want}")
    c.check(drawn["seconds"] == [reports[p["report"]]["times"]["factor"]
                                 for p in record["points"]], f"plotted times {drawn['seconds']}")
    return drawn


# The points of a strong sweep on 1 and 2 ranks, then its figure, and what may not be
# overwritten: the PNG, an existing sweep, the reports.
with suite.case("strong sweep, figure, refusals") as c:
    out = suite.root / "strong"
    run = sweep("strong", "--n", 800, "--ranks", "1,2", "--out", out)
    ok(c, run, "sweep")
    record, reports = check_against_reports(c, out, [1, 2])
    c.check(record["kind"] == "strong" and record["type"] == "float64" and
            all(p["n"] == 800 for p in record["points"]), f"record {record}")
    png = suite.root / "strong.png"
    ok(c, tool("plot_scaling.py", out, "--out", png), "plot")
    check_png(c, png, record, reports)

    before, figure = files(out), png.read_bytes()
    again = tool("plot_scaling.py", out, "--out", png)
    c.check(again.returncode == 6 and "exists" in again.stderr, f"plot over a PNG: {again}")
    c.check(png.read_bytes() == figure, "the refused plot changed the PNG")
    ok(c, tool("plot_scaling.py", out, "--out", png, "--replace"), "plot --replace")
    c.check(png.read_bytes()[:8] == PNG_MAGIC, "the replaced PNG is not a PNG")

    again = sweep("strong", "--n", 800, "--ranks", "1,2", "--out", out)
    c.check(again.returncode == 6 and "--resume" in again.stderr, f"sweep over a sweep: {again}")
    resumed = sweep("strong", "--n", 800, "--ranks", "1,2", "--out", out, "--resume")
    ok(c, resumed, "sweep --resume")
    c.check(resumed.stdout.count("skipped") == 2, f"resume ran points again:\n{resumed.stdout}")
    after = files(out)
    c.check({k: v for k, v in after.items() if k != "sweep.json"} ==
            {k: v for k, v in before.items() if k != "sweep.json"}, "a report changed")
    c.check(json.loads(after["sweep.json"])["points"] == record["points"], "points changed")
    other = sweep("strong", "--n", 600, "--ranks", "1,2", "--out", out, "--resume")
    c.check(other.returncode == 2 and "n 800 there, 600 now" in other.stderr,
            f"resume with another N: {other}")

# Weak scaling keeps A's share per rank: N^2 x element bytes / R just under the size asked
# (floor of the square root: within (2N + 1) / N^2 of it). float32: 4 bytes an element.
with suite.case("weak sweep keeps the share per rank") as c:
    out, share = suite.root / "weak", 1024 * 1024
    ok(c, sweep("weak", "--memory-per-rank", "1M", "--type", "float32", "--ranks", "1,2",
                "--out", out), "sweep")
    record, reports = check_against_reports(c, out, [1, 2])
    for p in record["points"]:
        got = p["n"] ** 2 * 4 / p["ranks"]
        c.check(0 <= (share - got) / share < (2 * p["n"] + 1) / p["n"] ** 2,
                f"{p['ranks']} rank(s), N = {p['n']}: {got:.0f} bytes per rank, asked {share}")
    c.check(reports[record["points"][0]["report"]]["type"] == "float32", "type not passed on")
    png = suite.root / "weak.png"
    ok(c, tool("plot_scaling.py", out, "--out", png), "plot")
    check_png(c, png, record, reports)

# A point that fails stops the sweep; the points before it stay, with nothing half-written,
# and --resume runs only what is missing. The stand-in fails whenever it runs on 2 ranks.
with suite.case("a failed point keeps the others; resume completes") as c:
    out = suite.root / "failing"
    failing = script(suite.root / "gridlu-fails-on-2", f"""#!/bin/sh
if [ "$OMPI_COMM_WORLD_SIZE" = 2 ]; then echo "gridlu: error: made to fail" >&2; exit 3; fi
exec {shlex.quote(suite.gridlu)} "$@"
""")
    run = sweep("strong", "--n", 600, "--ranks", "1,2", "--out", out, gridlu=failing)
    c.check(run.returncode == 1 and "2 rank(s)" in run.stderr and "made to fail" in run.stderr
            and "--resume" in run.stderr, f"failed sweep: exit {run.returncode}\n{run.stderr}")
    record, _ = load(out)
    c.check([p["ranks"] for p in record["points"]] == [1], f"kept {record['points']}")
    left = sorted(files(out))
    c.check(left == ["bench-r1-n600.json", "sweep.json"], f"left {left}")
    first = (out / "bench-r1-n600.json").read_bytes()
    resumed = sweep("strong", "--n", 600, "--ranks", "1,2", "--out", out, "--resume")
    ok(c, resumed, "resume")
    c.check(resumed.stdout.count("skipped") == 1, f"resume:\n{resumed.stdout}")
    check_against_reports(c, out, [1, 2])
    c.check((out / "bench-r1-n600.json").read_bytes() == first, "the first report changed")
    c.check(len(load(out)[0]["commands"]) == 2, "the resumed command is not recorded")

# With --calibration every point gets the model's prediction for the grid and block its
# bench used. The stand-in's `plan` answers from its own options, so a wrong option shows
# in the number; everything else goes to the real gridlu.
PLAN_STAND_IN = """#!/usr/bin/python3
import json, os, sys
args = sys.argv[1:]
if args == ["--help"]:
    print("Subcommands:\\n  bench   time the LU\\n  plan    predict a run")
elif args[:1] == ["plan"]:
    o = dict(zip(args[2::2], args[3::2]))
    p, q = map(int, o["--grid"].split("x"))
    assert os.path.isfile(o["--calibration"]) and p * q == int(o["--cores-per-node"])
    seconds = int(o["--n"]) ** 3 * 1e-10 / (p * q) + 1e-3 * int(o["--block"]) * p
    print(json.dumps({"predicted_seconds": seconds, "phases": {"gemm": seconds / 2},
                      "grid": [p, q], "block": int(o["--block"]), "fits": True}))
else:
    os.execv(GRIDLU, [GRIDLU] + args)
"""

with suite.case("calibration: the model's prediction per point") as c:
    out, calibration = suite.root / "model", suite.root / "calibration.json"
    calibration.write_text("{}\n")
    stand_in = script(suite.root / "gridlu-with-plan",
                      PLAN_STAND_IN.replace("GRIDLU", repr(suite.gridlu)))
    ok(c, sweep("strong", "--n", 600, "--ranks", "1,2", "--out", out, "--calibration",
                calibration, gridlu=stand_in), "sweep")
    record, reports = check_against_reports(c, out, [1, 2])
    for p in record["points"]:
        want = 600 ** 3 * 1e-10 / p["ranks"] + 1e-3 * p["block"] * p["grid"][0]
        c.check(abs(p["predicted_seconds"] - want) <= 1e-12 * want, f"prediction of {p}")
        c.check(p["predicted_phases"] == {"gemm": p["predicted_seconds"] / 2}, f"phases of {p}")
        c.check(f"--lookahead {p['lookahead']}" in p["plan_command"], p["plan_command"])
    png = suite.root / "model.png"
    ok(c, tool("plot_scaling.py", out, "--out", png), "plot")
    drawn = check_png(c, png, record, reports)
    t = [p["predicted_seconds"] for p in record["points"]]
    want = [1.0, t[0] / (2 * t[1])]
    got = drawn.get("predicted_efficiency") or []
    c.check(len(got) == 2 and all(abs(a - b) <= 1e-12 for a, b in zip(got, want)),
            f"plotted model efficiency {got}, expected {want}")

# Without a `plan` command, --calibration is refused before anything runs; without
# --calibration the same gridlu sweeps.
with suite.case("calibration without gridlu plan") as c:
    calibration = suite.root / "calibration.json"
    calibration.write_text("{}\n")
    no_plan = script(suite.root / "gridlu-without-plan", f"""#!/bin/sh
if [ "$1" = --help ]; then printf 'Subcommands:\\n  bench   time the LU\\n'; exit 0; fi
exec {shlex.quote(suite.gridlu)} "$@"
""")
    run = sweep("strong", "--n", 600, "--ranks", "1", "--out", suite.root / "no-plan",
                "--calibration", calibration, gridlu=no_plan)
    c.check(run.returncode == 2 and "gridlu plan" in run.stderr, f"no plan: {run}")
    c.check(not (suite.root / "no-plan").exists(), "the refused sweep made its folder")
    run = sweep("strong", "--n", 600, "--ranks", "1", "--out", suite.root / "no-file",
                "--calibration", suite.root / "missing.json", gridlu=no_plan)
    c.check(run.returncode == 2 and "missing.json" in run.stderr, f"no calibration: {run}")

# srun: the same launch line, `srun -n R` and the launcher's own arguments before gridlu.
# The stand-in notes its arguments and hands them to mpiexec, which takes the same -n.
with suite.case("srun launch lines") as c:
    log = suite.root / "srun.log"
    srun = script(suite.root / "srun", f"""#!/bin/sh
echo "$*" >> {shlex.quote(str(log))}
exec {shlex.quote(suite.mpiexec)} "$@"
""")
    ok(c, tool("sweep.py", "strong", "--n", 600, "--ranks", "1,2", "--repeat", 1, "--gridlu",
               suite.gridlu, "--launcher", srun, "--launcher-args", "--oversubscribe",
               "--block", 64, "--lookahead", 2, "--out", suite.root / "by-srun"), "sweep")
    lines = log.read_text().splitlines()
    c.check(len(lines) == 2, f"srun ran {len(lines)} times")
    for r, line in zip([1, 2], lines):
        argv = line.split()
        c.check(argv[:4] == ["-n", str(r), "--oversubscribe", suite.gridlu] and
                argv[4:5] == ["bench"] and "--block 64" in line and "--lookahead 2" in line,
                f"srun {line}")
    record, reports = load(suite.root / "by-srun")
    c.check(all(reports[p["report"]]["block"] == 64 and reports[p["report"]]["lookahead"] == 2
                for p in record["points"]), "--block or --lookahead not passed on")

suite.finish()
