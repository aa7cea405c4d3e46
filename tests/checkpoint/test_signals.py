"""gridlu solve asked to stop: SIGTERM, SIGUSR1 or SIGINT to its ranks, SIGUSR1 through mpiexec,
a second SIGTERM while the checkpoint is being written, a --stop-after budget. Each time exit 5,
no X, a sound checkpoint, a printed resume command, and a resume that reaches the
uninterrupted run's X and pivots."""

import os
import signal
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from checkpoint_support import (BLOCK, EVERY, N, RANKS, STOPPED, Job, System,  # noqa: E402
                                Watch, after_commits, check_elapsed, columns_done, harness,
                                partials, printed_resume, sound_checkpoint)

suite = harness.Suite(__doc__)
system = System(suite, seed=6203)

with suite.case("uninterrupted solve: X matches numpy") as c:
    system.solve_uninterrupted(c)


def stopped(c, job, ckpt, out, first_k=0):
    """A job asked to stop exited 5, wrote no X and left a sound checkpoint at least as far
    on as `first_k` columns and short of the end; returns the arguments of the resume command
    it printed, which must name the checkpoint directory wherever it is run from."""
    run = job.wait()
    c.require(not run.hung and run.code == STOPPED, f"expected exit 5: {run.describe()}")
    c.check(not out.exists(), f"a stopped run wrote {out}")
    cp = sound_checkpoint(c, ckpt, system.a)
    c.check(first_k <= cp["k"] < N, f"stopped with {cp['k']} of {N} columns done, "
                                    f"expected from {first_k} on and short of {N}")
    check_elapsed(c, cp, job.seconds)
    args = printed_resume(run)
    c.require(args, f"no `gridlu resume` command printed:\n{run.stdout}{run.stderr}")
    c.check(args[0] == str(ckpt.resolve()), f"the printed command resumes {args[0]}, not {ckpt}")
    return args


def resumed(c, args, ckpt, out):
    """The printed resume command, run on the same rank count, completes the solve."""
    c.succeeded(suite.run("resume", *args, ranks=RANKS))
    system.check_solved(c, ckpt, out)


def signalled(c, send):
    """Solve with periodic checkpoints, call send(job) once the first one is committed, and
    check the stop and the resume."""
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    job = Job(suite, system.solve_args(out, "--checkpoint", ckpt, "--checkpoint-every", EVERY),
              RANKS)
    reached = Watch(ckpt).until(job, after_commits(1))
    first_k = columns_done(ckpt) if reached else 0
    send(job)
    run = job.wait()
    c.require(reached, f"the run ended before its first checkpoint: {run.describe()}")
    resumed(c, stopped(c, job, ckpt, out, first_k), ckpt, out)


for sig in (signal.SIGTERM, signal.SIGUSR1, signal.SIGINT):
    with suite.case(f"{sig.name} to the ranks: exit 5, the printed resume command completes") as c:
        signalled(c, lambda job, s=sig: job.signal_ranks(s))

with suite.case("SIGUSR1 to mpiexec, which forwards it: exit 5, resume completes") as c:
    signalled(c, lambda job: job.proc.send_signal(signal.SIGUSR1))

# The second signal must come while the temporary file is still there; being late by a
# scheduling delay is the test's failure, not gridlu's, so it gets up to three tries.
with suite.case("SIGTERM, then SIGTERM again during the checkpoint write: exit 5, sound") as c:
    for attempt in range(3):
        ckpt, out = c.dir / f"ckpt{attempt}", c.dir / f"x{attempt}.h5"
        job = Job(suite, system.solve_args(out, "--checkpoint", ckpt, "--checkpoint-every",
                                           EVERY), RANKS)
        watch = Watch(ckpt)
        reached = watch.until(job, after_commits(1))
        first_k = columns_done(ckpt)
        job.signal_ranks(signal.SIGTERM)
        writing = watch.until(job, lambda w, now: w.writing())
        job.signal_ranks(signal.SIGTERM)
        hit = writing and bool(partials(ckpt))
        run = job.wait()
        c.require(reached, f"the run ended before its first checkpoint: {run.describe()}")
        if hit:
            break
    c.require(hit, "in three tries the second SIGTERM never fell within a checkpoint write")
    resumed(c, stopped(c, job, ckpt, out, first_k), ckpt, out)

# A budget too short for even one step and its checkpoint: gridlu stops at the first step it
# can. The time this takes, start-up, reading A and one checkpoint write, is the least any
# budget must allow.
with suite.case("--stop-after shorter than a checkpoint write: exit 5 at the first step") as c:
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    job = Job(suite, system.solve_args(out, "--checkpoint", ckpt, "--stop-after", "0.000001"),
              RANKS)
    least = job.announced(r"gridlu resume ")
    stopped(c, job, ckpt, out)
    c.require(least is not None, "no `gridlu resume` command printed")
    # The first step, and with the default look-ahead of 1 the one it set going.
    c.check(columns_done(ckpt) <= 2 * BLOCK,
            f"stopped after {columns_done(ckpt)} columns, not at the first step")
    # A budget that leaves no headway is said so, not only obeyed.
    said = job.wait().stdout
    c.check("time budget ran out at the first block step" in said,
            f"no word that the budget was too short:\n{said}")

# Relative paths, and the printed command run from another directory: what the checkpoint
# records must not depend on where the solve was started.
with suite.case("--stop-after half a run, relative paths: exit 5 in time, resume elsewhere") \
        as c:
    c.require(system.seconds and least, "no time from the uninterrupted or the shortest run")
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    # Half a run leaves room for the fixed costs only while the factorization dominates them;
    # under a sanitizer it does not, so the budget is at least the shortest stop's time + 1 s.
    budget = max(system.seconds / 2, least + 1)
    job = Job(suite, ["solve", os.path.relpath(system.path, c.dir), "--out", out.name,
                      "--block", BLOCK, "--checkpoint", ckpt.name, "--stop-after",
                      f"{budget / 60:.6f}"], RANKS, cwd=c.dir)
    done = job.announced(r"gridlu resume ")
    args = stopped(c, job, ckpt, out)
    # gridlu is done when it prints the resume command. After that Open MPI takes a second or
    # more over ranks that exit non-zero, and before it starts them: neither is gridlu's to
    # budget, so the tolerance of 1 s is for the start.
    c.check(done <= budget + 1, f"the stop came {done:.2f} s after launch, for a budget of "
                                f"{budget:.2f} s")
    resumed(c, args, ckpt, out)

suite.finish()
