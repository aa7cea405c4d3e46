#!/usr/bin/python3
"""A charged conductor for gridlu: the capacitance of a thin square plate.

`write` builds the boundary-element system of a square plate of side 1 held at 1 V:
m x m square panels of constant surface charge, collocation at the panel centres, units
with 4 pi eps0 = 1. Entry (i, j) is the potential at centre i of unit charge density on
panel j: h^2 / r_ij off the diagonal (midpoint rule) and 4 h ln(1 + sqrt 2) on it (the
exact potential at the centre of a uniformly charged square of side h). `read` sums the
solved charges into the capacitance C / (4 pi eps0 a).

    /usr/bin/python3 tools/plate_capacitance.py write --panels 48 plate.h5
    mpiexec -n 4 build/gridlu solve plate.h5 --out charges.h5
    /usr/bin/python3 tools/plate_capacitance.py read plate.h5 charges.h5
"""
import argparse
import sys

import h5py
import numpy as np

# C / (4 pi eps0 a) of a thin square plate is about 0.367 (recalled from memory: about
# 40.8 pF for a plate of side 1 m); coarse meshes of constant panels come out low.
REFERENCE = 0.367


def write(panels, path):
    h = 1.0 / panels
    centres = (np.arange(panels) + 0.5) * h
    x, y = np.meshgrid(centres, centres, indexing="ij")
    x, y = x.ravel(), y.ravel()
    r = np.hypot(x[:, None] - x[None, :], y[:, None] - y[None, :])
    np.fill_diagonal(r, 1.0)
    a = h * h / r
    np.fill_diagonal(a, 4.0 * h * np.log(1.0 + np.sqrt(2.0)))
    with h5py.File(path, "w") as f:
        f["A"] = a
        f["B"] = np.ones(panels * panels)
        f.attrs["scenario"] = "thin square plate of side 1 at 1 V, 4 pi eps0 = 1"
        f.attrs["panels_per_side"] = panels


def capacitance(system, solution):
    with h5py.File(system, "r") as f:
        panels = int(f.attrs["panels_per_side"])
    with h5py.File(solution, "r") as f:
        charges = f["X"][...]
    return float(np.sum(charges) / panels**2)


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = p.add_subparsers(dest="command", required=True)
    w = sub.add_parser("write", help="write the plate's system A x = b")
    w.add_argument("--panels", type=int, default=48, help="panels per side (n = panels^2)")
    w.add_argument("out")
    r = sub.add_parser("read", help="capacitance from gridlu's solution")
    r.add_argument("system")
    r.add_argument("solution")
    r.add_argument("--tolerance", type=float, help="fail unless within this fraction of %g" % REFERENCE)
    args = p.parse_args()
    if args.command == "write":
        write(args.panels, args.out)
        return 0
    c = capacitance(args.system, args.solution)
    off = c / REFERENCE - 1.0
    print(f"capacitance C / (4 pi eps0 a) = {c:.4f}  ({100 * off:+.2f} % from {REFERENCE})")
    return 1 if args.tolerance is not None and abs(off) > args.tolerance else 0


if __name__ == "__main__":
    sys.exit(main())
