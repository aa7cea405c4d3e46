"""jobs/solve-checkpointed.slurm under a real Slurm: a private one-node cluster (munged,
slurmctld, slurmd from Debian's packages) runs a copy of the script whose parameter block the
test edits as a user would, with a one-minute time limit that the solve does not fit in. Slurm's
warning signal must stop the first job with a checkpoint (exit 5), the script must submit its
follow-ups until one completes, and X must equal, bit for bit, that of an uninterrupted solve
run beside the chain outside Slurm. Slurm not installed is a failure: tools/install-deps.sh
installs it."""

import datetime
import json
import os
import re
import shlex
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "cli"))
import harness  # noqa: E402
from local_slurm import LocalSlurm, die_with_parent, missing_programs  # noqa: E402

SCRIPT = Path(__file__).resolve().parents[2] / "jobs" / "solve-checkpointed.slurm"
# Slurm checks time limits and warning signals every 30 s (docs/slurm.md, measured): with a
# lead of 25 s the signal comes 25 to 55 s before the one-minute limit, 5 to 35 s into a job,
# and the limit's SIGTERM 30 s or more after it. The factorization of order N (1.46e12 flops)
# takes about 50 s on one core of the development machine (27-29 GFLOP/s), well over what a
# first job can do, so the chain needs two jobs or more: 4 to 7 on a busy machine, where each
# job also spends 10-20 s reading and writing its checkpoint.
N = 13000
LIMIT, LEAD = "00:01:00", 25
# Without look-ahead a resume on the same grid and block size repeats the uninterrupted run's
# operations exactly, so X must be the same bits. (With look-ahead the trailing update is split
# differently around the restart, and X differs by rounding.)
OPTIONS = "--lookahead 0"
MAX_CONTINUATIONS = 10  # the test's own guard; a chain here took up to 6 on a busy machine
CHAIN_SECONDS = 300  # for the whole chain, which took 126-240 s on a busy machine


def interrupted(signum, frame):
    raise SystemExit(f"stopped by signal {signum}")  # runs the finally blocks below


def scratch_folder():
    """A temporary folder in memory where there is room for the system, a checkpoint being
    replaced and the outputs (6 N^2 doubles): the disk's speed, and its other users, stay out
    of the checkpoint writes and reads that each one-minute job does."""
    shm = Path("/dev/shm")
    room = shm.is_dir() and shutil.disk_usage(shm).free > 6 * N * N * 8
    return tempfile.TemporaryDirectory(prefix="gridlu-slurm-", dir=shm if room else None)


signal.signal(signal.SIGTERM, interrupted)
suite = harness.Suite(__doc__)
scratch = scratch_folder()
cluster = LocalSlurm(Path(scratch.name) / "slurm")
work = Path(scratch.name) / "work"
work.mkdir()
print(f"info: working in {work}")
env = {**cluster.env, "OPENBLAS_NUM_THREADS": "1"}
background = []


def start(argv):
    """A command in the background, in a session of its own (killed by group at the end)."""
    out = open(work / f"{Path(argv[0]).name}-{len(background)}.log", "w")
    proc = subprocess.Popen(list(map(str, argv)), cwd=work, env=env, stdout=out,
                            stderr=subprocess.STDOUT, start_new_session=True,
                            preexec_fn=die_with_parent)
    proc.log = Path(out.name)
    background.append(proc)
    return proc


def finished(proc, timeout):
    try:
        return proc.wait(timeout=timeout)
    except subprocess.TimeoutExpired:
        return None


def edit_parameters(text, shell, sbatch):
    """The script with the parameter block's variables and #SBATCH options set, as a user edits
    them; raises KeyError naming any parameter not found there."""
    block = re.search(r"# -+ parameters.*?\n(.*?)# -+ end of parameters", text, re.S)
    if not block:
        raise KeyError("the marked parameter block")
    head, body, tail = text[:block.start(1)], block.group(1), text[block.end(1):]
    for name, value in shell.items():
        body, n = re.subn(rf"^{name}=\S*", lambda m: f"{name}={shlex.quote(str(value))}", body,
                          flags=re.M)
        if n != 1:
            raise KeyError(f"{name}= in the parameter block")
    for name, value in sbatch.items():
        body, n = re.subn(rf"^#SBATCH --{name}=\S*", f"#SBATCH --{name}={value}", body,
                          flags=re.M)
        if n != 1:
            raise KeyError(f"#SBATCH --{name} in the parameter block")
    return head + body + tail


def seconds(stamp):
    return datetime.datetime.fromisoformat(stamp).timestamp()


def wait_for_chain(deadline):
    """Job ids seen in the queue until it is empty (every job submits its follow-up before it
    ends, so an empty queue is the end of the chain) or the deadline passes."""
    seen = []
    while time.monotonic() < deadline:
        queue = cluster.queue()
        seen += [j for j in queue if j not in seen]
        if not queue:
            return seen, True
        time.sleep(1)
    return seen, False


def job_records(first):
    """Slurm's record (scontrol) of every job from `first` on: the chain, and nothing else runs
    on this private cluster."""
    records, job_id = [], first
    while (record := cluster.job(job_id)):
        records.append(record)
        job_id += 1
    return records


try:
    with suite.case("a private Slurm starts: munged, slurmctld, slurmd; the node is idle") as c:
        c.require(not missing_programs(),
                  f"Slurm is not installed (missing {', '.join(missing_programs())}): "
                  "run `sh tools/install-deps.sh` as root")
        generate = start([suite.mpiexec, "-n", "2", suite.gridlu, "generate", "random", "--n", N,
                          "--rhs", 2, "--out", "system.h5"])
        started = time.monotonic()
        cluster.start()
        print(f"info: Slurm up in {time.monotonic() - started:.1f} s")
        c.require(finished(generate, 60) == 0,
                  f"gridlu generate failed: {generate.log.read_text()[-2000:]}")
    cluster_up = not suite.failed

    with suite.case("the script's copy, its parameter block edited, is submitted") as c:
        c.require(cluster_up, "no cluster")
        script = edit_parameters(SCRIPT.read_text(), shell={
            "gridlu": suite.gridlu, "input": "system.h5", "output": "x.h5", "checkpoint": "ckpt",
            "reports": "reports", "options": OPTIONS, "max_continuations": MAX_CONTINUATIONS},
            sbatch={"time": LIMIT, "signal": f"B:USR1@{LEAD}", "nodes": 1,
                    "ntasks-per-node": 1, "output": "reports/gridlu-solve-%j.out"})
        (work / "reports").mkdir()
        (work / "solve.slurm").write_text(script)
        submit = cluster.run("sbatch", "--parsable", "solve.slurm", cwd=work)
        c.require(submit.returncode == 0, f"sbatch failed: {submit.stderr}")
        first = int(submit.stdout.strip())
        chain_started = time.monotonic()
        # The uninterrupted solve, on the other core while the chain runs on one.
        reference = start([suite.mpiexec, "-n", "1", suite.gridlu, "solve", "system.h5",
                           "--out", "x-ref.h5", *OPTIONS.split()])
        seen, ended = wait_for_chain(chain_started + CHAIN_SECONDS)
        print(f"info: chain of {len(seen)} job(s) ended after "
              f"{time.monotonic() - chain_started:.0f} s")
        c.require(ended, f"the chain still runs after {CHAIN_SECONDS} s: jobs {seen}")
    submitted = not suite.failed

    with suite.case("several jobs ran: the first stopped with exit 5, the last completed") as c:
        c.require(submitted, "no chain")
        jobs = job_records(first)
        ids = [int(j["JobId"]) for j in jobs]
        # reference: Slurm's own records (scontrol), beside the script's outputs and reports
        c.require(len(jobs) >= 2, f"jobs {ids} ran: the solve fitted in one allocation")
        for i, job in enumerate(jobs):
            last = i == len(jobs) - 1
            out = (work / "reports" / f"gridlu-solve-{job['JobId']}.out").read_text()
            report = json.loads((work / "reports" / f"gridlu-solve-{job['JobId']}.json")
                                .read_text())
            start_t, end_t = seconds(job["StartTime"]), seconds(job["EndTime"])
            print(f"info: job {job['JobId']}: {end_t - start_t:.0f} s, {job['JobState']} "
                  f"exit {job['ExitCode']}, {report['checkpoint']['columns_done']} of {N} "
                  f"columns done, read {report['times']['read']:.1f} s, "
                  f"write {report['times']['write']:.1f} s")
            c.check(f"continuation {i}:" in out, f"job {ids[i]} is not continuation {i}:\n{out}")
            c.check(("solve" if i == 0 else "resume") in out.splitlines()[0],
                    f"job {ids[i]} ran {out.splitlines()[0]}")
            if last:
                c.check(job["JobState"] == "COMPLETED" and job["ExitCode"] == "0:0",
                        f"the last job {ids[i]}: {job['JobState']} {job['ExitCode']}")
                c.check(report["status"] == "solved", f"its report says {report['status']}")
                c.check("gridlu exited 0; the chain ends here" in out, out)
                continue
            c.check(job["ExitCode"] == "5:0", f"job {ids[i]} exited {job['ExitCode']}, not 5")
            c.check(report["status"] == "stopped" and
                    0 < report["checkpoint"]["columns_done"] < N,
                    f"job {ids[i]}'s report: {report['status']}, {report['checkpoint']}")
            # Slurm's warning, not the time limit, stopped it: before the limit and no SIGTERM.
            c.check(end_t - start_t < 60, f"job {ids[i]} ran {end_t - start_t:.0f} s")
            c.check(f"exited 5 with a checkpoint; follow-up job {ids[i + 1]}" in out,
                    f"job {ids[i]} did not submit {ids[i + 1]}:\n{out}")

    with suite.case("X is bitwise that of an uninterrupted solve; nothing left behind") as c:
        c.require(submitted, "no chain")
        # It started with the chain and has the same work.
        code = finished(reference, max(30, chain_started + CHAIN_SECONDS + 60 - time.monotonic()))
        c.require(code == 0, f"the uninterrupted solve exited {code}: "
                             f"{reference.log.read_text()[-2000:]}")
        for line in reference.log.read_text().splitlines():
            if line.split()[:1] in (["time"], ["speed"]):
                print(f"info: uninterrupted solve: {line.strip()}")
        x, x_ref = harness.read_h5(work / "x.h5", "X"), harness.read_h5(work / "x-ref.h5", "X")
        # reference: gridlu solve without interruption, same rank count and options
        c.require(x.shape == x_ref.shape, f"X is {x.shape}, the reference {x_ref.shape}")
        differ = np.flatnonzero(x.view(np.uint64) != x_ref.view(np.uint64))
        c.check(differ.size == 0,
                f"{differ.size} entries differ; ||X - X_ref||_F / ||X_ref||_F = "
                f"{harness.rel_diff(x, x_ref):.2e}")
        a, b = harness.read_h5(work / "system.h5", "A"), harness.read_h5(work / "system.h5", "B")
        berr = harness.backward_error(a, x, b)
        # reference: numpy's residual B - A X; LU with partial pivoting has a backward error of
        # a modest multiple of u (common practice), far below n u
        c.check(berr <= N * harness.eps(np.float64), f"normwise backward error {berr:.2e}")
        done = json.loads((work / "ckpt" / "complete.json").read_text())
        c.check(done["output"] == str(work / "x.h5"), f"complete.json: {done}")
        c.check(not (work / "ckpt" / "checkpoint.h5").exists(), "the working state is left")
finally:
    signal.signal(signal.SIGTERM, signal.SIG_IGN)  # a second one must not cut the clean-up
    for proc in background:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    cluster.stop()
    scratch.cleanup()
suite.finish()
