"""A private Slurm cluster of one node on this machine, for tests: munged, slurmctld and slurmd
run as root in the foreground with every file (configuration, munge key and socket, state,
spool, logs, pid files) under one folder, on ports of their own.

Every daemon is a child of this process, started with a parent-death signal: if the test is
killed outright (as ctest does at its timeout), the kernel sends each of them SIGTERM.
stop() ends the jobs first, then the daemons, each by its process id.
"""

import ctypes
import os
import shutil
import signal
import socket
import subprocess
import time
from pathlib import Path

# From Debian's munge, slurmctld, slurmd and slurm-client packages.
PROGRAMS = {name: f"/usr/sbin/{name}" for name in ("munged", "mungekey", "slurmctld", "slurmd")}
CLIENTS = ("sbatch", "squeue", "scontrol", "scancel", "srun", "sinfo")
NODE, PARTITION = "gridlu-node", "gridlu"
PR_SET_PDEATHSIG = 1


def missing_programs():
    """The daemons and client commands that are not installed."""
    return ([p for p in PROGRAMS.values() if not Path(p).exists()] +
            [c for c in CLIENTS if shutil.which(c) is None])


def _free_ports(count):
    """Ports free on the loopback now; the daemons bind them moments later."""
    socks = [socket.socket() for _ in range(count)]
    for s in socks:
        s.bind(("127.0.0.1", 0))
    ports = [s.getsockname()[1] for s in socks]
    for s in socks:
        s.close()
    return ports


def die_with_parent():
    """For preexec_fn: SIGTERM to the child when this process ends, however it ends."""
    ctypes.CDLL(None, use_errno=True).prctl(PR_SET_PDEATHSIG, signal.SIGTERM)


class LocalSlurm:
    def __init__(self, root, cpus=2, kill_wait=30):
        self.root = Path(root)
        self.root.mkdir(parents=True, exist_ok=True)
        self.cpus, self.kill_wait = cpus, kill_wait
        self.conf = self.root / "slurm.conf"
        self.socket = self.root / "munge.socket"
        self.env = {**os.environ, "SLURM_CONF": str(self.conf)}
        self.procs = {}

    def log(self, name):
        return self.root / f"{name}.log"

    def _write_config(self):
        ctld_port, slurmd_port = _free_ports(2)
        host = socket.gethostname().split(".")[0]
        r = self.root
        for d in ("state", "spool"):
            (r / d).mkdir(exist_ok=True)
        self.conf.write_text(f"""\
ClusterName=gridlutest
SlurmctldHost={host}(127.0.0.1)
SlurmctldPort={ctld_port}
SlurmdPort={slurmd_port}
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
AuthInfo=socket={self.socket}
CredType=cred/munge
StateSaveLocation={r}/state
SlurmdSpoolDir={r}/spool
SlurmctldPidFile={r}/slurmctld.pid
SlurmdPidFile={r}/slurmd.pid
SlurmctldLogFile={self.log('slurmctld')}
SlurmdLogFile={self.log('slurmd')}
PlugStackConfig={r}/plugstack.conf
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SchedulerType=sched/builtin
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/filetxt
JobCompLoc={r}/jobcomp.txt
MpiDefault=pmix
ReturnToService=2
KillWait={self.kill_wait}
MinJobAge=3600
InactiveLimit=0
SlurmdParameters=config_overrides
NodeName={NODE} NodeAddr=127.0.0.1 CPUs={self.cpus} State=UNKNOWN
PartitionName={PARTITION} Nodes={NODE} Default=YES MaxTime=INFINITE State=UP
""")
        (r / "plugstack.conf").write_text("")

    def _spawn(self, name, argv):
        out = open(self.root / f"{name}.stdout", "w")
        self.procs[name] = subprocess.Popen(argv, stdout=out, stderr=subprocess.STDOUT,
                                            env=self.env, cwd=self.root,
                                            preexec_fn=die_with_parent)
        out.close()

    def start(self, timeout=60):
        """Start the three daemons and wait until the node is idle; raises RuntimeError with
        the daemons' last log lines when it does not come up."""
        self._write_config()
        key = self.root / "munge.key"
        subprocess.run([PROGRAMS["mungekey"], "--create", f"--keyfile={key}"], check=True)
        os.chmod(key, 0o600)
        self._spawn("munged", [PROGRAMS["munged"], "-F", "--force", f"--socket={self.socket}",
                               f"--key-file={key}", f"--pid-file={self.root}/munged.pid",
                               f"--log-file={self.log('munged')}",
                               f"--seed-file={self.root}/munged.seed"])
        self._wait(lambda: self.socket.exists(), timeout, "munged's socket")
        self._spawn("slurmctld", [PROGRAMS["slurmctld"], "-D", "-i", "-f", str(self.conf)])
        self._wait(lambda: self.ok("scontrol", "ping"), timeout, "slurmctld answering")
        self._spawn("slurmd", [PROGRAMS["slurmd"], "-D", "-N", NODE, "-f", str(self.conf)])
        self._wait(lambda: self.node_state() == "idle", timeout, "the node idle")

    def _wait(self, ready, timeout, what):
        deadline = time.monotonic() + timeout
        while not ready():
            dead = [n for n, p in self.procs.items() if p.poll() is not None]
            if dead or time.monotonic() > deadline:
                why = f"{', '.join(dead)} exited" if dead else f"no {what} after {timeout} s"
                raise RuntimeError(f"the local Slurm did not start: {why}\n{self.tails()}")
            time.sleep(0.2)

    def tails(self, lines=8):
        text = []
        for name in self.procs:
            for f in (self.log(name), self.root / f"{name}.stdout"):
                if f.exists():
                    tail = f.read_text(errors="replace").splitlines()[-lines:]
                    text += [f"  {f.name}: {t}" for t in tail]
        return "\n".join(text)

    def run(self, *argv, cwd=None, timeout=30):
        return subprocess.run(argv, capture_output=True, text=True, env=self.env, cwd=cwd,
                              timeout=timeout)

    def ok(self, *argv):
        try:
            return self.run(*argv).returncode == 0
        except subprocess.TimeoutExpired:
            return False

    def node_state(self):
        return self.run("sinfo", "-h", "-N", "-n", NODE, "-o", "%t").stdout.strip()

    def job(self, job_id):
        """scontrol's record of a job as {key: value}, {} once it is gone."""
        out = self.run("scontrol", "show", "job", "-o", str(job_id)).stdout
        return dict(f.split("=", 1) for f in out.split() if "=" in f)

    def queue(self):
        """Ids of the jobs pending or running."""
        out = self.run("squeue", "-h", "-o", "%i").stdout
        return [int(j) for j in out.split()]

    def stop(self):
        """Cancel every job and let the node clean up, then end the daemons by process id:
        SIGTERM, SIGKILL after 10 s."""
        if "slurmctld" in self.procs and self.procs["slurmctld"].poll() is None:
            for _ in range(2):  # a job may submit its successor while being cancelled
                jobs = self.queue()
                if jobs:
                    self.run("scancel", *map(str, jobs))
                deadline = time.monotonic() + self.kill_wait + 10
                while self.queue() and time.monotonic() < deadline:
                    time.sleep(0.5)
        for name in ("slurmd", "slurmctld", "munged"):
            proc = self.procs.get(name)
            if proc is None or proc.poll() is not None:
                continue
            proc.send_signal(signal.SIGTERM)
            try:
                proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
