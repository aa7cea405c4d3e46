"""gridlu solve asked to stop: SIGTERM, SIGUSR1 or SIGINT to its ranks, SIGUSR1 through mpiexec,
a second SIGTERM while the checkpoint is being written, a --stop-after budget. Each time exit 5,
no X, a sound checkpoint, a printed resume command, and a resume that reaches the
uninterrupted run's X and pivots."""

import signal
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from checkpoint_support import (EVERY, N, RANKS, STOPPED, Job, System, Watch,  # noqa: E402
                                after_commits, columns_done, harness, partials, printed_resume,
                                sound_checkpoint)

suite = harness.Suite(__doc__)
system = System(suite, seed=6203)

with suite.case("uninterrupted solve: X matches numpy") as c:
    system.solve_uninterrupted(c)


def stopped(c, run, ckpt, out, first_k=0):
    """A run asked to stop exited 5, wrote no X and left a sound checkpoint at least as far
    on as `first_k` columns and short of the end; returns the printed resume arguments."""
    c.require(not run.hung and run.code == STOPPED, f"expected exit 5: {run.describe()}")
    c.check(not out.exists(), f"a stopped run wrote {out}")
    cp = sound_checkpoint(c, ckpt, system.a)
    c.check(first_k <= cp["k"] < N, f"stopped with {cp['k']} of {N} columns done, "
                                    f"expected from {first_k} on and short of {N}")
    args = printed_resume(run)
    c.require(args, f"no `gridlu resume` command printed:\n{run.stdout}{run.stderr}")
    c.check(args[:1] == [str(ckpt)], f"the printed command resumes {args[:1]}, not {ckpt}")
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
    resumed(c, stopped(c, run, ckpt, out, first_k), ckpt, out)


for sig in (signal.SIGTERM, signal.SIGUSR1, signal.SIGINT):
    with suite.case(f"{sig.name} to the ranks: exit 5, the printed resume command completes") as c:
        signalled(c, lambda job, s=sig: job.signal_ranks(s))

with suite.case("SIGUSR1 to mpiexec, which forwards it: exit 5, resume completes") as c:
    signalled(c, lambda job: job.proc.send_signal(signal.SIGUSR1))

with suite.case("SIGTERM, then SIGTERM again during the checkpoint write: exit 5, sound") as c:
    def twice(job):
        job.signal_ranks(signal.SIGTERM)
        writing = Watch(c.dir / "ckpt").until(job, lambda w, now: w.writing())
        job.signal_ranks(signal.SIGTERM)
        # Only a signal sent while the temporary file is still there tests the write.
        c.check(writing and partials(c.dir / "ckpt"),
                "the second SIGTERM did not fall within a checkpoint write")

    signalled(c, twice)

with suite.case("--stop-after half an uninterrupted run: exit 5 within it, resume completes") \
        as c:
    c.require(system.seconds, "no time from the uninterrupted solve")
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    budget = system.seconds / 2
    began = time.monotonic()
    run = suite.run(*system.solve_args(out, "--checkpoint", ckpt, "--stop-after",
                                       f"{budget / 60:.6f}"), ranks=RANKS)
    wall = time.monotonic() - began
    args = stopped(c, run, ckpt, out)
    # Launching the ranks is outside gridlu's reckoning: allow 1 s for it.
    c.check(wall <= budget + 1, f"the run took {wall:.2f} s for a budget of {budget:.2f} s")
    resumed(c, args, ckpt, out)

suite.finish()
