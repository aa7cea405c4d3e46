"""gridlu solve with periodic checkpoints, killed with SIGKILL (mpiexec and every rank at once)
at chosen moments, then resumed: whatever the moment, the directory holds either no checkpoint,
and resume says so, or a sound one, from which resume reaches the uninterrupted run's X and
pivots. Then solves stopped by SIGTERM and resumed on other rank counts, grids and block
sizes."""

import json
import re
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from checkpoint_support import (EVERY, NO_DATA, RANKS, Job, System, Watch,  # noqa: E402
                                check_elapsed, columns_done, committed, harness,
                                inspect_checkpoint, interrupt, sound_checkpoint)

suite = harness.Suite(__doc__)
system = System(suite, seed=5101)

with suite.case("uninterrupted solve: X matches numpy") as c:
    system.solve_uninterrupted(c)


def checkpointed_solve(out, directory, *options):
    return system.solve_args(out, "--checkpoint", directory, "--checkpoint-every", EVERY,
                             *options)


timing = {}
with suite.case(f"solve with a checkpoint every {float(EVERY) * 60:g} s, uninterrupted: X, pivots, "
                "time so far") as c:
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    job = Job(suite, checkpointed_solve(out, ckpt), RANKS)
    watch = Watch(ckpt)
    watch.follow(job)
    c.succeeded(job.wait())
    check_elapsed(c, system.check_solved(c, ckpt, out), job.seconds)
    durations = [end - start for start, end in zip(watch.starts, watch.ends)]
    # The kill moments below reach the fourth checkpoint; there are more in a run, as the
    # interval counts factorization time only.
    c.require(len(durations) >= 5, f"{len(durations)} checkpoint writes seen, expected >= 5")
    timing.update(write=float(np.median(durations)))


def at(seconds):
    return lambda w, now: now - w.origin >= seconds


def writing(i, fraction=0.0):
    """`fraction` of a typical write's duration into the i-th checkpoint write."""
    return lambda w, now: len(w.starts) >= i and now - w.starts[i - 1] >= fraction * timing["write"]


def after_commit(i, delay=0.0):
    return lambda w, now: len(w.commits) >= i and now - w.commits[i - 1] >= delay


def final_committed():
    """The checkpoint of the whole factorization (k = n) has just been committed: the solve
    with the factors and the write of X are yet to come."""
    seen = []

    def moment(w, now):
        if len(w.commits) == len(seen):
            return False
        seen.append(now)
        return columns_done(w.dir) == system.n
    return moment


# Half the interval between checkpoints, in seconds.
BETWEEN = float(EVERY) * 60 / 2
# Each moment, and whether the first checkpoint has been committed by then.
MOMENTS = [
    ("0.05 s after launch", at(0.05), False),
    ("as the first checkpoint write begins", writing(1), False),
    ("halfway through the first checkpoint write", writing(1, 0.5), False),
    ("just after the first checkpoint is committed", after_commit(1), True),
    ("between the first and second checkpoints", after_commit(1, BETWEEN), True),
    ("as the second checkpoint write begins", writing(2), True),
    ("halfway through the second checkpoint write", writing(2, 0.5), True),
    ("at the end of the second checkpoint write (flush, verify, rename)", writing(2, 0.9), True),
    ("just after the second checkpoint is committed", after_commit(2), True),
    ("as the third checkpoint write begins", writing(3), True),
    ("a third of the way through the third checkpoint write", writing(3, 0.33), True),
    ("two thirds of the way through the third checkpoint write", writing(3, 0.67), True),
    ("between the third and fourth checkpoints", after_commit(3, BETWEEN), True),
    ("just after the final checkpoint, before X is written", final_committed(), True),
]
if suite.sanitized():
    # The sanitizers watch gridlu's code, and a SIGKILLed run runs none after the kill; what
    # differs between moments for that code is what resume finds, and it removes a write's
    # staging unread (io::remove_stale_staging), however far the write got. These six leave
    # every such state: no job recorded; a job and a write's staging but no checkpoint; a
    # checkpoint, just committed and later with no write under way; a checkpoint and a
    # write's staging; the checkpoint of the whole factorization. (A job with neither
    # checkpoint nor staging: test_ownership.py, case 9.) The release build keeps them all.
    MOMENTS = [MOMENTS[i] for i in (0, 2, 3, 4, 6, 13)]

outcomes = {"checkpoint": 0, "none": 0}
for description, moment, _ in MOMENTS:
    with suite.case(f"SIGKILL {description}, then resume") as c:
        c.require(timing, "no timings from the uninterrupted checkpointed solve")
        ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
        job = Job(suite, checkpointed_solve(out, ckpt), RANKS)
        reached = Watch(ckpt).until(job, moment)
        job.kill()
        run = job.wait()
        c.require(reached, f"the run ended before the moment: {run.describe()}")
        if committed(ckpt) is None:
            outcomes["none"] += 1
            if not (ckpt / "job.json").exists():
                # Killed before the job was recorded: nothing names a job to continue.
                c.failed_with(suite.run("resume", ckpt, ranks=RANKS), NO_DATA)
                c.check(not out.exists(), f"resume without a job wrote {out}")
                continue
            # The job is recorded: resume starts it from column 0, whatever staging the
            # kill left behind.
            c.succeeded(suite.run("resume", ckpt, ranks=RANKS))
            system.check_solved(c, ckpt, out)
            continue
        outcomes["checkpoint"] += 1
        problems, _ = inspect_checkpoint(ckpt / "checkpoint.h5", system.a)
        c.check(not problems, "checkpoint left by the kill: " + "; ".join(problems))
        c.succeeded(suite.run("resume", ckpt, ranks=RANKS))
        system.check_solved(c, ckpt, out)

# Every kill after the first commit should find a checkpoint; one is let off (10 of the 11
# in the full list).
NEEDED = sum(after_first for _, _, after_first in MOMENTS) - 1
with suite.case(f"at least {NEEDED} of {len(MOMENTS)} kills left a checkpoint to resume from") \
        as c:
    c.check(outcomes["checkpoint"] >= NEEDED, f"kills leaving a checkpoint or none: {outcomes}")


def summary_shows(c, run, grid, block=None):
    """The resumed run's summary reports the grid (and block size) it was given."""
    c.check(re.search(rf"\b{grid}\b", run.stdout), f"summary does not show grid {grid}:\n"
                                                    f"{run.stdout}")
    if block is not None:
        c.check(re.search(rf"\bblock {block}\b", run.stdout),
                f"summary does not show block {block}:\n{run.stdout}")


with suite.case("1 rank, SIGTERM -> 2 ranks, SIGTERM -> 4 ranks: X and pivots") as c:
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    wall = interrupt(suite, c, checkpointed_solve(out, ckpt), 1, ckpt)
    first = sound_checkpoint(c, ckpt, system.a)
    check_elapsed(c, first, wall)
    wall += interrupt(suite, c, ["resume", ckpt, "--checkpoint-every", EVERY], 2, ckpt)
    second = sound_checkpoint(c, ckpt, system.a)
    check_elapsed(c, second, wall)
    c.check(second["k"] >= first["k"], f"columns done went from {first['k']} to {second['k']}")
    c.check(second["restarts"] == first["restarts"] + 1,
            f"restarts {first['restarts']} -> {second['restarts']} after one resume")
    job = Job(suite, ["resume", ckpt], 4)
    run = job.wait()
    c.succeeded(run)
    # The default grid: the one `gridlu plan` predicts fastest for the job (block 224).
    plan = suite.run("plan", "--json", "--n", system.n, "--nodes", 1, "--cores-per-node", 4,
                     "--mem-per-node", 64, "--block", 224)
    c.require(plan.code == 0, plan.describe())
    summary_shows(c, run, "x".join(map(str, json.loads(plan.stdout)["grid"])))
    final = system.check_solved(c, ckpt, out, same_grid=False)
    check_elapsed(c, final, wall + job.seconds)
    c.check(final["restarts"] == first["restarts"] + 2,
            f"restarts {first['restarts']} -> {final['restarts']} after two resumes")

with suite.case("grid 2x2, block 32, SIGTERM -> grid 1x3, block 48: X and pivots") as c:
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    interrupt(suite, c, checkpointed_solve(out, ckpt, "--grid", "2x2"), 4, ckpt)
    sound_checkpoint(c, ckpt, system.a)
    run = suite.run("resume", ckpt, "--grid", "1x3", "--block", 48, ranks=3)
    c.succeeded(run)
    summary_shows(c, run, "1x3", 48)
    system.check_solved(c, ckpt, out, same_grid=False)

suite.finish()
