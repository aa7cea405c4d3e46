"""gridlu calibrate and gridlu plan, read as a user would: the calibration file with json, the
plan's figures against the sizes computed here with numpy, Young's and Daly's checkpoint
interval computed here from the plan's own write time, and the refusals. Then the progress
line's estimate of the time left against the time the factorization really took."""

import json
import math
import re
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import harness  # noqa: E402

suite = harness.Suite(__doc__)
rates = suite.root / "rates.json"
KEYS = ["memory_per_rank_bytes", "fits", "grid", "block", "predicted_seconds",
        "checkpoint_bytes", "checkpoint_interval_seconds"]

with suite.case("calibrate on 2 ranks: a complete calibration, no scratch file left") as c:
    scratch = c.dir / "scratch"
    scratch.mkdir()
    c.succeeded(suite.run("calibrate", "--type", "float64", "--checkpoint-dir", scratch,
                          "--write-size", "32M", "--out", rates, ranks=2))
    cal = json.loads(rates.read_text())
    c.check(cal["format"] == "gridlu calibration 2" and cal["ranks"] == 2, f"header: {cal}")
    c.check(list(cal["types"]) == ["float64"], f"types: {list(cal['types'])}")
    f64 = cal["types"]["float64"]
    for kernel in ("gemm", "trsm", "panel"):
        c.check(f64[kernel] and all(rate > 0 for _, _, rate in f64[kernel]),
                f"{kernel} rates: {f64[kernel]}")
    c.check(len({(rows, k) for rows, k, _ in f64["gemm"]}) >= 20, "GEMM samples cover few shapes")
    c.check(f64["swap_seconds_per_entry"] > 0, "no interchange cost")
    # A sanity bound only: on a machine busy with other tests the share moves a lot.
    c.check(0.1 < f64["gemm_in_factorization"] < 2,
            f"GEMM inside LU at {f64['gemm_in_factorization']} of its rate alone")
    # Two ranks stood up as one process column: its costs measured, and not free.
    column = f64["process_column"]
    c.check(set(column) == {"panel", "pivot_search", "interchange", "broadcast"} and
            all(0.1 < x < 50 for x in column.values()), f"process column factors: {column}")
    for link in ("point_to_point", "row_broadcast", "column_broadcast"):
        c.check(cal[link]["latency_seconds"] >= 0 and cal[link]["bandwidth_bytes_per_second"] > 0,
                f"{link}: {cal[link]}")
    c.check(cal["checkpoint_write_bytes_per_second"] > 0, "no write bandwidth")
    c.check(not list(scratch.iterdir()), f"left in the directory: {list(scratch.iterdir())}")

with suite.case("calibrate refuses to overwrite its output without --force") as c:
    before = rates.read_bytes()
    c.failed_with(suite.run("calibrate", "--type", "float64", "--out", rates), 2, "exists")
    c.check(rates.read_bytes() == before, "the earlier calibration changed")


def plan(*args):
    return suite.run("plan", "--calibration", rates, "--json", *args)


with suite.case("plan --json: memory, disk and grid against the sizes computed here") as c:
    n, nodes, cores = 30000, 4, 8
    run = plan("--n", n, "--nodes", nodes, "--cores-per-node", cores, "--mem-per-node", 64)
    c.succeeded(run)
    p = json.loads(run.stdout)
    c.check(all(k in p for k in KEYS), f"missing keys: {[k for k in KEYS if k not in p]}")
    parts, (rows, cols), b = p["memory_parts_bytes"], p["grid"], p["block"]
    # A's share on rank 0, which holds the most of the block-cyclic layout: at least an
    # even share, at most one block more each way.
    share = n * n * 8 / (nodes * cores)
    c.check(share <= parts["a_share"] <= share * (1 + b * rows / n) * (1 + b * cols / n),
            f"A's share {parts['a_share']:.3e} against {share:.3e}")
    c.check(math.isclose(sum(parts.values()), p["memory_per_rank_bytes"]),
            f"parts {parts} do not add up to {p['memory_per_rank_bytes']}")
    c.check(p["fits"] is True, "64 GiB per node should fit")
    c.check(p["checkpoint_bytes"] == n * n * 8, f"checkpoint bytes {p['checkpoint_bytes']}")
    c.check(p["grid"][0] * p["grid"][1] == nodes * cores, f"grid {p['grid']}")
    c.check(p["checkpoint_interval_seconds"] is None, "an interval without an MTBF")
    times = [x["predicted_seconds"] for x in p["candidates"]]
    c.check(times[0] == p["predicted_seconds"] and times == sorted(times),
            "candidates not fastest first")
    # Common practice: at least 2/3 n^3 flops can go no faster than every rank at its best
    # measured GEMM rate.
    best = max(rate for _, _, rate in json.loads(rates.read_text())["types"]["float64"]["gemm"])
    floor = 2 / 3 * n ** 3 / (nodes * cores * best * 1e9)
    c.check(p["predicted_seconds"] > floor, f"{p['predicted_seconds']} s beats the GEMM bound")

with suite.case("plan --precision mixed: complex64 factors, half a copy more of A") as c:
    n, ranks = 20000, 16
    run = suite.run("plan", "--json", "--n", n, "--type", "complex128", "--precision", "mixed",
                    "--nodes", 2, "--cores-per-node", 8, "--mem-per-node", 64)
    c.succeeded(run)
    p = json.loads(run.stdout)
    parts = p["memory_parts_bytes"]
    c.check(p["factored_type"] == "complex64", f"factored in {p['factored_type']}")
    c.check(p["checkpoint_bytes"] == n * n * 8, f"checkpoint bytes {p['checkpoint_bytes']}")
    share, (rows, cols), b = n * n * 16 / ranks, p["grid"], p["block"]
    c.check(share <= parts["a_share"] <= share * (1 + b * rows / n) * (1 + b * cols / n),
            f"A's share {parts['a_share']} against {share} (grid {p['grid']}, block {b})")
    c.check(math.isclose(parts["a_copies"], parts["a_share"] / 2), f"parts {parts}")

with suite.case("plan: too little memory is said, in JSON and in words") as c:
    args = ["--n", 30000, "--nodes", 1, "--cores-per-node", 2, "--mem-per-node", 4]
    run = plan(*args)
    c.succeeded(run)
    c.check(json.loads(run.stdout)["fits"] is False, "7.2 GB per rank fits in 2 GiB")
    text = suite.run("plan", "--calibration", rates, *args)
    c.succeeded(text)
    c.check("does NOT fit" in text.stdout, f"no warning in:\n{text.stdout}")


def daly(write, mtbf):
    """Daly's interval (Daly 2006, recalled from memory), Young's sqrt(2 d M) refined."""
    if write >= 2 * mtbf:
        return mtbf
    x = write / (2 * mtbf)
    return math.sqrt(2 * write * mtbf) * (1 + math.sqrt(x) / 3 + x / 9) - write


with suite.case("plan --mtbf: Young's and Daly's interval from the plan's own write time") as c:
    run = plan("--n", 100000, "--type", "float64", "--nodes", 16, "--cores-per-node", 32,
               "--mem-per-node", 256, "--mtbf", 6)
    c.succeeded(run)
    p = json.loads(run.stdout)
    write = p["checkpoint_write_seconds"]
    c.check(write == p["checkpoint_bytes"] / json.loads(rates.read_text())
            ["checkpoint_write_bytes_per_second"], f"write time {write}")
    expected = daly(write, 6 * 3600)
    c.check(math.isclose(p["checkpoint_interval_seconds"], expected, rel_tol=1e-9),
            f"interval {p['checkpoint_interval_seconds']} against {expected}")
    young = math.sqrt(2 * write * 6 * 3600)
    c.check(0.8 * young < p["checkpoint_interval_seconds"] < 1.2 * young,
            f"far from Young's {young}")
    c.check(p["expected_seconds"] > p["predicted_seconds"], "failures cost nothing")

with suite.case("plan refusals: exit 2 for usage, 3 for a calibration file") as c:
    base = ["--n", 1000, "--nodes", 1, "--cores-per-node", 8, "--mem-per-node", 8]
    c.failed_with(plan(*base, "--grid", "3x3"), 2, "grid")
    c.failed_with(plan(*base, "--type", "complex128"), 2, "complex128")
    c.failed_with(plan("--n", 0, *base[2:]), 2)
    c.failed_with(plan("--n", 2**24 + 1, *base[2:]), 2, "orders up to 16777216")
    c.failed_with(suite.run("plan", "--calibration", c.dir / "none.json", *base), 3, "none.json")
    bad = c.dir / "bad.json"
    bad.write_text('{"format": "something"}')
    c.failed_with(suite.run("plan", "--calibration", bad, *base), 3, "bad.json")
    # A calibration of the first format lacks the process column's factors: measure again.
    old = json.loads(rates.read_text())
    old["format"] = "gridlu calibration 1"
    for figures in old["types"].values():
        del figures["process_column"]
    bad.write_text(json.dumps(old))
    c.failed_with(suite.run("plan", "--calibration", bad, *base), 3, "calibrate again")

with suite.case("the progress line's time left matches the time the factorization took") as c:
    system, out = c.dir / "a.h5", c.dir / "x.h5"
    c.succeeded(suite.run("generate", "random", "--n", 6000, "--out", system, ranks=2))
    run = suite.run("solve", system, "--out", out, "--progress", ranks=2)
    c.succeeded(run)
    lines = re.findall(r"factorization\s+([\d.]+) %\s+elapsed\s+(\d+) s\s+left ~\s*(\d+) s",
                       run.stderr)
    c.require(len(lines) >= 3, f"progress lines: {run.stderr}")
    total = float(lines[-1][1])
    c.check(lines[-1][2] == "0", f"time left at the end: {lines[-1]}")
    for percent, elapsed, left in lines[:-1]:
        if float(percent) >= 20:  # the pace is known by then
            finish = float(elapsed) + float(left)
            c.check(abs(finish - total) <= 0.5 * total + 1,
                    f"at {percent} % it said {finish} s in all; it took {total} s")

suite.finish()
