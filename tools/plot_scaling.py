#!/usr/bin/python3
"""Draws a scaling study made by tools/sweep.py: time, parallel efficiency, phases.

    python3 tools/plot_scaling.py DIR [--out FILE.png] [--replace]

Reads DIR/sweep.json and the bench reports it lists; writes one PNG (default
DIR/scaling.png) with (a) the factorization time against the rank count, log-log, beside
ideal scaling and, when the sweep has them, the model's predictions; (b) the parallel
efficiency; (c) each rank count's phases, stacked. The numbers drawn are also stored in
the PNG, as JSON in a text chunk named "gridlu-scaling".

Efficiency is the rate per rank against that of the smallest rank count R0, with the work
taken as N^3: E(R) = (N_R / N_R0)^3 R0 T(R0) / (R T(R)). For strong scaling that is
T1 / (R T_R). For weak scaling it is T1 / T_R only if the work per rank were constant;
with A's share per rank fixed, LU's work per rank grows as sqrt(R), so the time is scaled
by the work.

The PNG is written whole (a temporary file in the same folder, renamed); an existing file
is refused (exit 6) unless --replace. Exit 3: no readable sweep in DIR.
"""
import argparse
import json
import os
import sys
import tempfile

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402 (after the backend is chosen)
from matplotlib.ticker import FormatStrFormatter, NullLocator, ScalarFormatter  # noqa: E402

# The bench report's phases, stacked in this order. "panel" includes the pivot search, so
# its bar is the rest of the panel.
PHASES = [("panel", "panel (other than pivot search)"), ("pivot_search", "pivot search"),
          ("interchange", "interchanges"), ("broadcast", "broadcasts"), ("trsm", "TRSM"),
          ("gemm", "GEMM"), ("wait", "waiting for panels (idle)")]
CAPTION = ("Phases: the slowest rank's seconds in each, in the median factorization. With "
           "look-ahead the phases overlap, and 'waiting for panels' is idle time, so a stack "
           "need not equal the wall time (black line).")


def load(directory):
    with open(os.path.join(directory, "sweep.json")) as f:
        sweep = json.load(f)
    if not sweep["points"]:
        raise ValueError("the sweep has no points yet")
    reports = {}
    for p in sweep["points"]:
        with open(os.path.join(directory, p["report"])) as f:
            reports[p["report"]] = json.load(f)
    return sweep, reports


def efficiency(ranks, n, seconds):
    """Rate per rank against the first point's, the work taken as N^3."""
    r0, n0, t0 = ranks[0], n[0], seconds[0]
    return [(nn / n0) ** 3 * r0 * t0 / (r * t) for r, nn, t in zip(ranks, n, seconds)]


def series(sweep, reports):
    """Everything the figure draws, as plain numbers."""
    points = sorted(sweep["points"], key=lambda p: p["ranks"])
    ranks = [p["ranks"] for p in points]
    n = [p["n"] for p in points]
    runs = [reports[p["report"]] for p in points]
    seconds = [r["times"]["factor"] for r in runs]
    phases = {k: [r["phases"][k] for r in runs] for k, _ in PHASES}
    phases["panel"] = [a - b for a, b in zip(phases["panel"], phases["pivot_search"])]
    s = {"kind": sweep["kind"], "ranks": ranks, "n": n, "grid": [r["grid"] for r in runs],
         "seconds": seconds, "efficiency": efficiency(ranks, n, seconds),
         "ideal_seconds": [seconds[0] * e for e in efficiency(ranks, n, [1.0] * len(n))],
         "phases": phases}
    if all("predicted_seconds" in p for p in points):
        s["predicted_seconds"] = [p["predicted_seconds"] for p in points]
        s["predicted_efficiency"] = efficiency(ranks, n, s["predicted_seconds"])
    return s


def efficiency_label(s):
    r0 = s["ranks"][0]
    base = r"T_1" if r0 == 1 else rf"{r0}\,T_{{{r0}}}"
    if s["kind"] == "strong":
        return rf"parallel efficiency  ${base} \,/\, (R\,T_R)$"
    return (rf"parallel efficiency  $(N_R/N_{{{r0}}})^3\,{base} \,/\, (R\,T_R)$" + "\n"
            "(rate per rank; the work grows as $N^3$)")


def title(sweep, reports):
    first = reports[sweep["points"][0]["report"]]
    m = sweep["machine"]
    if sweep["kind"] == "strong":
        what = f"Strong scaling of gridlu's LU, {sweep['type']}, N = {sweep['n']}"
    else:
        ns = sorted(p["n"] for p in sweep["points"])
        what = (f"Weak scaling of gridlu's LU, {sweep['type']}, A's share "
                f"{sweep['memory_per_rank']} per rank (N = {ns[0]} to {ns[-1]})")
    return (f"{what}\n{m['hostname']}: {m['cpu_model']}, {m['cores']} cores, "
            f"{m.get('blas', '')}\nblock {first['block']}, look-ahead {first['lookahead']}, "
            f"median of {sweep['repeat']} factorizations, {sweep['date'][:10]}")


def rank_axis(ax, ranks):
    ax.set_xscale("log")
    ax.set_xticks(ranks)
    ax.xaxis.set_major_formatter(ScalarFormatter())
    ax.xaxis.set_minor_locator(NullLocator())
    ax.set_xlabel("ranks R")
    ax.grid(True, which="both", alpha=0.3)


def draw_time(ax, s):
    ax.loglog(s["ranks"], s["seconds"], "o-", label="measured (median)")
    ideal = "ideal: $T_1 / R$" if s["kind"] == "strong" else "ideal: rate per rank kept"
    ax.loglog(s["ranks"], s["ideal_seconds"], "k--", label=ideal)
    if "predicted_seconds" in s:
        ax.loglog(s["ranks"], s["predicted_seconds"], "-", color="C3", label="model (gridlu plan)")
    if s["kind"] == "weak":
        for r, t, n in zip(s["ranks"], s["seconds"], s["n"]):
            ax.annotate(f"N = {n}", (r, t), textcoords="offset points", xytext=(4, 6), fontsize=8)
    rank_axis(ax, s["ranks"])
    ax.yaxis.set_major_formatter(FormatStrFormatter("%g"))
    ax.yaxis.set_minor_formatter(FormatStrFormatter("%g"))
    ax.set_ylabel("factorization time (s)")
    ax.set_title("(a) time", loc="left")
    ax.legend(fontsize=8)


def draw_efficiency(ax, s):
    ax.plot(s["ranks"], s["efficiency"], "o-", label="measured")
    if "predicted_efficiency" in s:
        ax.plot(s["ranks"], s["predicted_efficiency"], "-", color="C3", label="model")
    ax.axhline(1.0, color="k", linestyle="--", label="ideal")
    rank_axis(ax, s["ranks"])
    ax.set_ylim(0, max(1.1, *s["efficiency"], *s.get("predicted_efficiency", [])) * 1.05)
    ax.set_ylabel(efficiency_label(s))
    ax.set_title("(b) parallel efficiency", loc="left")
    ax.legend(fontsize=8, loc="lower left")


def draw_phases(ax, s):
    x = range(len(s["ranks"]))
    bottom = [0.0] * len(s["ranks"])
    for key, label in PHASES:
        ax.bar(x, s["phases"][key], bottom=bottom, width=0.6, label=label)
        bottom = [b + v for b, v in zip(bottom, s["phases"][key])]
    ax.hlines(s["seconds"], [i - 0.4 for i in x], [i + 0.4 for i in x], colors="k",
              label="factor time (wall)")
    ax.set_xticks(list(x), [f"{r} ({g[0]}x{g[1]})" + ("" if s["kind"] == "strong" else
                                                      f"\nN = {n}")
                            for r, g, n in zip(s["ranks"], s["grid"], s["n"])])
    ax.set_xlabel("ranks (grid)")
    ax.set_ylabel("seconds")
    ax.set_title("(c) phases", loc="left")
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))


def figure(sweep, reports, s):
    fig, axes = plt.subplots(1, 3, figsize=(17, 5.6), gridspec_kw={"width_ratios": [1, 1, 1]})
    draw_time(axes[0], s)
    draw_efficiency(axes[1], s)
    draw_phases(axes[2], s)
    fig.suptitle(title(sweep, reports), fontsize=10)
    fig.text(0.5, 0.015, CAPTION, ha="center", fontsize=8.5)
    fig.tight_layout(rect=(0, 0.04, 1, 1))
    return fig


def place(tmp, out, replace):
    """The finished temporary file under its name; without replace, only if the name is
    free (a hard link fails on an existing name, so no check-then-write race)."""
    if replace:
        os.replace(tmp, out)
        return
    try:
        os.link(tmp, out)
    finally:
        os.unlink(tmp)


def fail(code, message):
    print(f"plot_scaling: error: {message}", file=sys.stderr)
    sys.exit(code)


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("dir", help="a folder written by tools/sweep.py")
    p.add_argument("--out", help="the PNG (default DIR/scaling.png)")
    p.add_argument("--replace", action="store_true", help="replace an existing --out")
    args = p.parse_args()
    out = os.path.abspath(args.out or os.path.join(args.dir, "scaling.png"))
    if os.path.exists(out) and not args.replace:
        fail(6, f"{out} exists (--replace to replace it)")
    try:
        sweep, reports = load(args.dir)
    except (OSError, ValueError, KeyError) as e:
        fail(3, f"no sweep to draw in {args.dir}: {e}")
    s = series(sweep, reports)
    fig = figure(sweep, reports, s)
    fd, tmp = tempfile.mkstemp(dir=os.path.dirname(out), prefix=".plot-", suffix=".png")
    umask = os.umask(0o22)
    os.umask(umask)
    os.fchmod(fd, 0o666 & ~umask)  # as an ordinary new file, not mkstemp's 0600
    os.close(fd)
    try:
        fig.savefig(tmp, dpi=110, metadata={"gridlu-scaling": json.dumps(s)})
        place(tmp, out, args.replace)
    except FileExistsError:
        fail(6, f"{out} appeared meanwhile; left alone")
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    print(f"plot_scaling: {out}")


if __name__ == "__main__":
    main()
