"""gridlu solve asked to stop: SIGTERM, SIGUSR1 or SIGINT to its ranks, SIGUSR1 through mpiexec,
a second SIGTERM while the checkpoint is being written, a --stop-after budget, Ctrl-C and
SIGTERM to tools/launch. Each time exit 5, no X, a sound checkpoint, a printed resume command,
and a resume that reaches the uninterrupted run's X and pivots. Then what gridlu cannot
control: SIGTERM to a plain mpiexec, which ends the job itself, and mpiexec killed outright,
after which the ranks must not run on; the directory resumes either way.

What Open MPI 4.1.4's mpiexec does with each signal was measured and is written down in
docs/signals.md; the cases below cite it where they allow for it."""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from checkpoint_support import (BLOCK, EVERY, RANKS, STOPPED, Job, System,  # noqa: E402
                                Watch, after_commits, alive, check_elapsed, columns_done,
                                factors_of, harness, partials, printed_resume, sound_checkpoint,
                                staging_left)

LAUNCH = Path(__file__).resolve().parents[2] / "tools" / "launch"
# Seconds within which ranks whose launcher is gone must have ended. The spec asks for
# seconds; gridlu's own watch takes at most 0.2 s to notice and 3 s of grace
# (src/workflows/stop.cpp), and Open MPI 4.1.4 ends such ranks after about 1 s itself; the
# rest is room for a loaded machine.
LAUNCHER_GONE_SECONDS = 6

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
    n = system.n
    c.check(first_k <= cp["k"] < n, f"stopped with {cp['k']} of {n} columns done, "
                                    f"expected from {first_k} on and short of {n}")
    check_elapsed(c, cp, job.seconds)
    args = printed_resume(run)
    c.require(args, f"no `gridlu resume` command printed:\n{run.stdout}{run.stderr}")
    c.check(args[0] == str(ckpt.resolve()), f"the printed command resumes {args[0]}, not {ckpt}")
    return args


def resumed(c, args, ckpt, out):
    """The printed resume command, run on the same rank count, completes the solve and leaves
    nothing staged anywhere in the case's directory."""
    c.succeeded(suite.run("resume", *args, ranks=RANKS))
    system.check_solved(c, ckpt, out)
    c.check(not staging_left(c.dir), f"staging left after the resume: {staging_left(c.dir)}")


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


# One handler takes SIGTERM, SIGUSR1 and SIGINT (src/workflows/stop.cpp), and mpiexec and
# tools/launch hand the ranks SIGUSR1: signals and routes differ, gridlu's code does not.
# Under the sanitizers, which watch that code, SIGTERM to the ranks stands for them all
# (SIGUSR1 reaches the ranks again in the last case); the release build tries every route.
EVERY_ROUTE = not suite.sanitized()

SIGNALS = (signal.SIGTERM, signal.SIGUSR1, signal.SIGINT) if EVERY_ROUTE else (signal.SIGTERM,)
for sig in SIGNALS:
    with suite.case(f"{sig.name} to the ranks: exit 5, the printed resume command completes") as c:
        signalled(c, lambda job, s=sig: job.signal_ranks(s))

if EVERY_ROUTE:
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
                      "--block", BLOCK, "--save-factors", factors_of(out).name,
                      "--checkpoint", ckpt.name, "--stop-after",
                      f"{budget / 60:.6f}"], RANKS, cwd=c.dir)
    done = job.announced(r"gridlu resume ")
    args = stopped(c, job, ckpt, out)
    # gridlu is done when it prints the resume command. After that Open MPI takes a second or
    # more over ranks that exit non-zero, and before it starts them: neither is gridlu's to
    # budget, so the tolerance of 1 s is for the start.
    c.check(done <= budget + 1, f"the stop came {done:.2f} s after launch, for a budget of "
                                f"{budget:.2f} s")
    resumed(c, args, ckpt, out)


def checkpointed_job(c, every=EVERY, **launch):
    """A solve with periodic checkpoints, once it has committed its first; with the columns
    that checkpoint holds (0 if the job ended first) and the Watch that saw it."""
    ckpt, out = c.dir / "ckpt", c.dir / "x.h5"
    job = Job(suite, system.solve_args(out, "--checkpoint", ckpt, "--checkpoint-every", every),
              RANKS, **launch)
    watch = Watch(ckpt)
    reached = watch.until(job, after_commits(1))
    return job, ckpt, out, columns_done(ckpt) if reached else 0, reached


# A terminal's Ctrl-C goes to the foreground process group: tools/launch's, and mpiexec's too
# if they shared one (mpiexec would then end the job itself and exit 1).
LAUNCH_SIGNALS = (("Ctrl-C (SIGINT to its process group)",
                   lambda job: os.killpg(job.proc.pid, signal.SIGINT)),
                  ("SIGTERM", lambda job: job.proc.send_signal(signal.SIGTERM)))
for name, send in LAUNCH_SIGNALS if EVERY_ROUTE else ():
    with suite.case(f"{name} to tools/launch: exit 5, nothing staged, resume completes") as c:
        job, ckpt, out, first_k, reached = checkpointed_job(c, launcher=str(LAUNCH))
        send(job)
        run = job.wait()
        c.require(reached, f"the run ended before its first checkpoint: {run.describe()}")
        args = stopped(c, job, ckpt, out, first_k)
        c.check(not staging_left(c.dir), f"staging left by the stop: {staging_left(c.dir)}")
        resumed(c, args, ckpt, out)

# Open MPI's own end of a job (docs/signals.md): SIGCONT, SIGTERM one second later, SIGKILL a
# second after that, and mpiexec exits 1 whatever the ranks return. gridlu may finish its
# stop within that second or not; either way one honest line at most, the last checkpoint
# committed stays sound, no rank outlives mpiexec, and a stop it announced left nothing
# staged.
with suite.case("SIGTERM to plain mpiexec: exit 5 or Open MPI's 1, sound checkpoint") as c:
    # The ranks hear of it a second after mpiexec: checkpoints at almost every step make
    # the run last about 4 s on 2 cores, so that second falls well inside it.
    job, ckpt, out, first_k, reached = checkpointed_job(c, every="0.0001")
    ranks = job.rank_pids()
    job.proc.send_signal(signal.SIGTERM)
    try:
        job.proc.wait(timeout=harness.TIMEOUT_SECONDS)
    except subprocess.TimeoutExpired:
        pass
    # mpiexec's SIGKILL may still be tearing a large (sanitized) rank down when it returns.
    deadline = time.monotonic() + LAUNCHER_GONE_SECONDS
    while any(alive(pid) for pid in ranks) and time.monotonic() < deadline:
        time.sleep(0.05)
    outliving = [pid for pid in ranks if alive(pid)]
    run = job.wait()
    c.require(reached, f"the run ended before its first checkpoint: {run.describe()}")
    c.require(not run.hung, f"hung: {run.describe()}")
    c.check(run.code in (STOPPED, 1), f"expected exit 5, or Open MPI's 1: {run.describe()}")
    c.check(not outliving, f"ranks {outliving} outlived mpiexec by {LAUNCHER_GONE_SECONDS} s")
    lines = run.gridlu_lines()
    c.check(len(lines) <= 1 and all(line.startswith("gridlu: error: ") for line in lines),
            f"expected at most one 'gridlu: error: ' line on stderr, got {lines!r}")
    c.check(not out.exists(), f"a stopped run wrote {out}")
    cp = sound_checkpoint(c, ckpt, system.a)
    n = system.n
    c.check(first_k <= cp["k"] < n, f"{cp['k']} of {n} columns in the checkpoint, expected "
                                    f"from {first_k} on and short of {n}")
    if printed_resume(run):
        c.check(not staging_left(c.dir), f"staging left by an announced stop: "
                                         f"{staging_left(c.dir)}")
    resumed(c, [ckpt.resolve()], ckpt, out)

def outlived(running):
    """Seconds until running() turns false, waiting at most three times the allowed time."""
    start = time.monotonic()
    while running() and time.monotonic() - start < 3 * LAUNCHER_GONE_SECONDS:
        time.sleep(0.05)
    return time.monotonic() - start


# mpiexec killed outright leaves each rank in a process group of its own, reparented.
with suite.case("kill -9 of mpiexec: the ranks end within seconds, the directory resumes") as c:
    job, ckpt, out, first_k, reached = checkpointed_job(c)
    ranks = job.rank_pids()
    job.proc.kill()
    job.proc.wait()
    lasted = outlived(lambda: any(alive(pid) for pid in ranks))
    run = job.wait()
    c.require(reached, f"the run ended before its first checkpoint: {run.describe()}")
    c.require(len(ranks) == RANKS, f"found ranks {ranks}")
    c.check(lasted <= LAUNCHER_GONE_SECONDS, f"ranks ran on {lasted:.1f} s after mpiexec was "
                                             f"killed")
    resumed(c, [ckpt.resolve()], ckpt, out)


def orphan(c, env):
    """gridlu bench, long enough to run for minutes, started with `env` by a shell that leaves
    it a second later (time to start and see its parent); returns its pid."""
    sh = subprocess.run(["/bin/sh", "-c", '"$0" bench --n 1024 --repeat 100000 >/dev/null 2>&1 & '
                         'echo $!; sleep 1', os.path.realpath(suite.gridlu)], env=env, cwd=c.dir,
                        capture_output=True, text=True, timeout=30, start_new_session=True)
    return int(sh.stdout)


# gridlu's own watch, apart from whatever Open MPI does: a process started by a launcher
# (the variable mpiexec sets) ends once its parent is gone; one started by hand is left alone,
# as `nohup` asks.
with suite.case("launcher variable set, parent gone: ended within seconds; unset: runs on") \
        as c:
    watched = orphan(c, dict(os.environ, OMPI_COMM_WORLD_SIZE="1"))
    free = orphan(c, {k: v for k, v in os.environ.items() if k != "OMPI_COMM_WORLD_SIZE"})
    lasted = outlived(lambda: alive(watched))
    time.sleep(1)  # had the other been watched too, it would have ended by now
    unwatched_alive = alive(free)
    for pid in (watched, free):
        if alive(pid):
            os.kill(pid, signal.SIGKILL)
    c.check(lasted <= LAUNCHER_GONE_SECONDS, f"ran on {lasted:.1f} s after its parent left")
    c.check(unwatched_alive, "a process started without a launcher ended with its parent")

with suite.case("SIGUSR1 to the ranks of a solve without --checkpoint: exit 5, one line, "
                "no X, nothing staged") as c:
    out = c.dir / "x.h5"
    job = Job(suite, ["solve", system.path, "--out", out, "--block", BLOCK, "--progress"], RANKS)
    # --progress prints its first line after the first block step: the run is factoring.
    c.require(job.announced(r"factorization") is not None, "the run ended before factoring")
    job.signal_ranks(signal.SIGUSR1)
    run = job.wait()
    c.failed_with(run, STOPPED, r"nothing was kept")
    c.check(not out.exists(), f"a stopped run wrote {out}")
    c.check(not staging_left(c.dir), f"staging left: {staging_left(c.dir)}")

suite.finish()
