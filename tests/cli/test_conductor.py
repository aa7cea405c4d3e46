"""The built-in conductor problems end to end: `gridlu generate sphere|cube|sphere-helmholtz`
read back with h5py and held to closed forms and to numpy, `gridlu solve` on them, and
`gridlu demo` printing the capacitance beside its known value with the trust figures."""

import json
import re
import sys
from pathlib import Path

import h5py
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import harness  # noqa: E402

suite = harness.Suite(__doc__)

# Capacitance of the unit cube over 4 pi eps0 a (Hwang & Mascagni 2004; recalled from memory).
CUBE_RATIO = 0.66067813


def far_entries_agree(c, f, count=20):
    """Entries of panels far from the collocation point against the midpoint rule computed
    here: area_j / (4 pi |c_i - c_j|) (the kernel's definition), to 1e-3."""
    a, areas, centroids = f["A"], f["areas"][...], f["centroids"][...]
    n = areas.size
    rng = np.random.default_rng(11)
    checked = 0
    while checked < count:
        i, j = rng.integers(n, size=2)
        r = np.linalg.norm(centroids[i] - centroids[j])
        if r < 10 * np.sqrt(areas[j]):
            continue
        expect = areas[j] / (4 * np.pi * r)
        c.check(abs(a[i, j] - expect) <= 1e-3 * expect, f"A[{i}, {j}] = {a[i, j]}, midpoint {expect}")
        checked += 1


def charge(x_path, system):
    with h5py.File(x_path, "r") as fx, h5py.File(system, "r") as fs:
        return np.sum(fx["X"][...] * fs["areas"][...])


with suite.case("sphere file: areas, entries and capacitance 4 pi R through solve") as c:
    system, x, report = c.dir / "sphere.h5", c.dir / "x.h5", c.dir / "r.json"
    radius = 2.0
    c.succeeded(suite.run("generate", "sphere", "--subdivisions", "3", "--radius", str(radius),
                          "--out", system, ranks=2))
    with h5py.File(system, "r") as f:
        c.require(f["A"].shape == (1280, 1280), f"A is {f['A'].shape}")
        c.check(np.all(f["B"][...] == 1), "B must be all ones (potential 1)")
        # The panels are inscribed in the sphere: their area is a little below 4 pi R^2.
        area = np.sum(f["areas"][...])
        c.check(0.99 * 4 * np.pi * radius**2 < area < 4 * np.pi * radius**2, f"area {area}")
        c.check(np.allclose(np.linalg.norm(f["centroids"][...], axis=1), radius, rtol=0.01),
                "centroids lie within 1 % of the sphere")
        far_entries_agree(c, f)
        entry_error = float(f.attrs["entry_error"])
    c.succeeded(suite.run("solve", system, "--out", x, "--report", report, ranks=2))
    cap = charge(x, system)
    # Textbook electrostatics: C = 4 pi eps0 R.
    c.check(abs(cap / (4 * np.pi * radius) - 1) < 0.01, f"C = {cap}, 4 pi R = {4 * np.pi * radius}")
    r = json.loads(report.read_text())
    c.check(r["entry_error"] == entry_error, f"the report's entry error {r['entry_error']}")
    c.check(r["flags"] == [], f"flags {r['flags']}")


with suite.case("cube file: area 6 a^2, capacitance against Hwang & Mascagni") as c:
    system, x = c.dir / "cube.h5", c.dir / "x.h5"
    side = 0.5
    c.succeeded(suite.run("generate", "cube", "--divisions", "8", "--side", str(side), "--out",
                          system, ranks=3))
    with h5py.File(system, "r") as f:
        c.require(f["A"].shape == (768, 768), f"A is {f['A'].shape}")
        c.check(abs(np.sum(f["areas"][...]) - 6 * side**2) < 1e-12, "the faces' area is 6 a^2")
        far_entries_agree(c, f)
    c.succeeded(suite.run("solve", system, "--out", x, "--grid", "3x1", "--block", "50", ranks=3))
    expect = 4 * np.pi * side * CUBE_RATIO
    c.check(abs(charge(x, system) / expect - 1) < 0.02, f"C = {charge(x, system)}, expected {expect}")


with suite.case("sphere-helmholtz file: X as numpy solves it, density near k / (e^ikR sin kR)") as c:
    system, x = c.dir / "helmholtz.h5", c.dir / "x.h5"
    k = 2.0
    c.succeeded(suite.run("generate", "sphere-helmholtz", "--subdivisions", "2", "--wavenumber",
                          str(k), "--out", system, ranks=2))
    c.succeeded(suite.run("solve", system, "--out", x, "--grid", "2x1", ranks=2))
    with h5py.File(system, "r") as fs, h5py.File(x, "r") as fx:
        a, b, areas, got = fs["A"][...], fs["B"][...], fs["areas"][...], fx["X"][...]
    c.require(np.iscomplexobj(a), "a Helmholtz system is complex")
    c.check(not np.allclose(a, a.T), "collocation makes A non-symmetric")
    ref = np.linalg.solve(a, b)
    c.check(np.linalg.norm(got - ref) <= 1e-10 * np.linalg.norm(ref), "X against numpy's solve")
    density = np.sum(got * areas) / np.sum(areas)
    expect = k / (np.exp(1j * k) * np.sin(k))
    c.check(abs(density - expect) < 0.05 * abs(expect), f"density {density}, expected {expect}")


def demo_answer(c, run):
    """The relative difference the demo prints in its answer line."""
    m = re.search(r"answer\s+capacitance (\S+) against .* = (\S+): ([-+]\S+) %", run.stdout)
    c.require(m, f"no capacitance line in {run.stdout!r}")
    computed, expected, off = float(m[1]), float(m[2]), float(m[3])
    c.check(abs(computed / expected - 1 - off / 100) < 1e-4, "the printed percentage")
    return computed, expected


with suite.case("demo: the sphere's capacitance within 1 % with the trust figures") as c:
    report = c.dir / "demo.json"
    run = suite.run("demo", "--subdivisions", "3", "--report", report, ranks=2)
    c.succeeded(run)
    computed, expected = demo_answer(c, run)
    c.check(abs(expected / (4 * np.pi) - 1) < 1e-7, f"the known value 4 pi R, not {expected}")
    c.check(abs(computed / expected - 1) < 0.01, f"C = {computed}")
    c.check("trust" in run.stdout and "entries" in run.stdout, "trust and entry-error lines")
    r = json.loads(report.read_text())
    c.check(r["n"] == 1280 and r["trusted_digits"] >= 2 and r["flags"] == [],
            f"report {r['n']}, {r['trusted_digits']}, {r['flags']}")


def helmholtz_demo(c, k, name):
    """The report of `gridlu demo sphere-helmholtz` on 320 panels at wavenumber k."""
    report = c.dir / f"{name}.json"
    c.succeeded(suite.run("demo", "sphere-helmholtz", "--subdivisions", "2", "--wavenumber",
                          repr(k), "--report", report, ranks=2))
    return json.loads(report.read_text())


with suite.case("demo sphere-helmholtz: flagged at the discrete resonance, not beside it") as c:
    # The mesh is inscribed in the sphere, so its first interior resonance lies a little
    # above kR = pi: find where the condition estimate peaks by golden-section search.
    lo, hi, ratio = 3.1, 3.3, (np.sqrt(5) - 1) / 2
    cond = {}

    def condition(k):
        if k not in cond:
            cond[k] = helmholtz_demo(c, k, f"k{len(cond)}")["condition_estimate_inf"]
        return cond[k]

    for _ in range(10):
        k1, k2 = hi - ratio * (hi - lo), lo + ratio * (hi - lo)
        lo, hi = (lo, k2) if condition(k1) > condition(k2) else (k1, hi)
    peak = max(cond, key=cond.get)
    r = helmholtz_demo(c, peak, "peak")
    c.check(np.pi < peak < 1.02 * np.pi, f"the peak at kR = {peak}")
    c.check("ill_conditioned" in r["flags"] and r["trusted_digits"] == 0,
            f"at kR = {peak}: flags {r['flags']}, digits {r['trusted_digits']}")
    for k in (2.0, 4.0):
        r = helmholtz_demo(c, k, f"away{k}")
        c.check(r["flags"] == [] and r["trusted_digits"] >= 1,
                f"at kR = {k}: flags {r['flags']}, digits {r['trusted_digits']}")
        c.check(r["condition_estimate_inf"] * 100 < cond[peak], "the peak stands out")


with suite.case("wrong combinations are refused before any work") as c:
    c.failed_with(suite.run("demo", "cube", "--subdivisions", "2"), 2, "--subdivisions")
    c.failed_with(suite.run("demo", "random", "--wavenumber", "2"), 2, "--wavenumber")
    c.failed_with(suite.run("generate", "sphere-helmholtz", "--type", "float64", "--out",
                            c.dir / "h.h5"), 2)
    c.check(not (c.dir / "h.h5").exists(), "nothing written")
    kept = c.dir / "kept.h5"
    kept.write_bytes(b"earlier output")
    c.failed_with(suite.run("generate", "sphere", "--subdivisions", "0", "--out", kept), 2)
    c.check(kept.read_bytes() == b"earlier output", "an existing file is kept")

suite.finish()
