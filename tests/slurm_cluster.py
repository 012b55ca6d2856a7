"""A throwaway one-node SLURM cluster on this machine, for tests.

``one_node_slurm(workdir)`` installs Debian's SLURM and MUNGE packages when they
are missing, starts ``munged``, ``slurmctld`` and ``slurmd`` directly (no systemd
here), waits until the node takes jobs, yields a :class:`Cluster`, and always
tears everything down again: running jobs are cancelled, the daemons it started
are stopped, leftover job processes are killed and the controller's state is
removed. Configuration, logs and state all live under ``workdir``; the only
file outside it is the symlink ``/etc/slurm/slurm.conf`` to the workdir's
configuration (for job steps that drop ``SLURM_CONF``), removed at teardown.
Pass ``Cluster.env`` (os.environ plus ``SLURM_CONF``) to every
``sbatch``/``squeue``/``snakemake`` call.

Needs root (CI runs as root). Run this file directly to time a bring-up:
``python tests/slurm_cluster.py [--hold]``.

``run_snakemake_bounded`` runs one Snakemake command with a time limit that
sends SIGINT first (so Snakemake cancels its SLURM jobs), SIGKILL later.
"""

from __future__ import annotations

import contextlib
import dataclasses
import os
import pwd
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator, Sequence
from pathlib import Path

PACKAGES = ("slurmctld", "slurmd", "slurm-client", "munge")
# One executable from each package, looked up to decide whether to install.
EXECUTABLES = ("slurmctld", "slurmd", "sbatch", "squeue", "scontrol", "munged", "munge", "unmunge")
MUNGE_KEY = Path("/etc/munge/munge.key")
# Where SLURM commands look when SLURM_CONF is unset. Snakemake's job-step plugin
# clears SLURM_* variables before its nested `srun`, so the cluster's slurm.conf
# must also be found here: a symlink to the workdir's file, removed at teardown.
SYSTEM_SLURM_CONF = Path("/etc/slurm/slurm.conf")
MUNGE_RUN_DIR = Path("/run/munge")
PARTITION = "local"

# squeue forgets a finished job MinJobAge seconds after it ended. Without an
# accounting database `sacct` cannot answer, so the Snakemake SLURM executor has to
# see every finished job in squeue; its status checks are at most 180 s apart, and it
# only trusts squeue when MinJobAge >= 3 x the first check interval.
MIN_JOB_AGE_SECONDS = 300

# Unix socket paths are limited to 107 bytes; slurmd puts one per job step in its
# spool directory, named "<node>_<jobid>.<stepid>".
MAX_SPOOL_PATH = 70

_apt_updated = False


class ClusterError(RuntimeError):
    """The test cluster could not be installed or brought up."""


@dataclasses.dataclass
class Cluster:
    """A running one-node cluster. ``env`` is os.environ plus SLURM_CONF."""

    workdir: Path
    conf: Path
    node: str
    partition: str
    cpus: int
    real_memory_mb: int
    env: dict[str, str]
    install_seconds: float = 0.0
    bringup_seconds: float = 0.0

    def run(
        self, *args: str, timeout: float = 30, check: bool = True
    ) -> subprocess.CompletedProcess:
        """Run a SLURM client command (``sbatch``, ``squeue``...) against this cluster."""
        return subprocess.run(
            list(args), env=self.env, capture_output=True, text=True, timeout=timeout, check=check
        )


# --------------------------------------------------------------------------- install


def missing_executables() -> list[str]:
    return [exe for exe in EXECUTABLES if _which(exe) is None]


def _which(exe: str) -> str | None:
    # Daemons live in /usr/sbin, which is not on every PATH.
    return shutil.which(exe, path=os.environ.get("PATH", "") + ":/usr/sbin:/sbin")


def ensure_packages(log: Path) -> float:
    """Install the SLURM and MUNGE packages if any executable is missing.

    Returns the seconds spent installing (0.0 when nothing was missing).
    """
    global _apt_updated
    missing = missing_executables()
    if not missing:
        return 0.0
    if os.geteuid() != 0:
        raise ClusterError(
            f"SLURM test cluster: {', '.join(missing)} not installed and this is not root; "
            f"run as root or `apt-get install -y {' '.join(PACKAGES)}` first"
        )
    start = time.monotonic()
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    commands = []
    if not _apt_updated:
        commands.append(["apt-get", "update"])
    commands.append(["apt-get", "install", "-y", *PACKAGES])
    with open(log, "a") as out:
        for command in commands:
            result = subprocess.run(
                command, stdout=out, stderr=subprocess.STDOUT, env=env, timeout=900
            )
            if result.returncode != 0:
                raise ClusterError(
                    f"`{' '.join(command)}` failed (exit {result.returncode}); see {log}"
                )
            if command[1] == "update":
                _apt_updated = True
    still_missing = missing_executables()
    if still_missing:
        raise ClusterError(
            f"after installing {PACKAGES}, still missing: {still_missing}; see {log}"
        )
    return time.monotonic() - start


# --------------------------------------------------------------------------- config


def node_name() -> str:
    """The short host name (as `hostname -s`): slurmd registers under it."""
    return socket.gethostname().split(".")[0]


def real_memory_mb(meminfo: Path = Path("/proc/meminfo")) -> int:
    """Memory to declare for the node, in MiB.

    slurmd drains a node whose declared RealMemory exceeds what it measures, and it
    measures slightly less than MemTotal; 95 % of MemTotal stays safely below.
    """
    for line in meminfo.read_text().splitlines():
        if line.startswith("MemTotal:"):
            kib = int(line.split()[1])
            return int(kib / 1024 * 0.95)
    raise ClusterError(f"{meminfo}: no MemTotal line")


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("", 0))
        return sock.getsockname()[1]


def write_slurm_conf(workdir: Path, node: str, cpus: int, memory_mb: int) -> Path:
    state, spool, logs = workdir / "state", workdir / "spool", workdir / "logs"
    for folder in (state, spool, logs):
        folder.mkdir(parents=True, exist_ok=True)
    if len(str(spool)) > MAX_SPOOL_PATH:
        raise ClusterError(
            f"SLURM test cluster: work folder path too long for slurmd's sockets "
            f"({len(str(spool))} > {MAX_SPOOL_PATH} characters): {spool}; use a shorter workdir"
        )
    ctld_port, slurmd_port = _free_port(), _free_port()
    lines = [
        "# Written by tests/slurm_cluster.py for a one-node test cluster; removed at teardown.",
        "ClusterName=mkforest-test",
        f"SlurmctldHost={node}(127.0.0.1)",
        f"SlurmctldPort={ctld_port}",
        f"SlurmdPort={slurmd_port}",
        "SlurmUser=root",
        "SlurmdUser=root",
        "AuthType=auth/munge",
        "CredType=cred/munge",
        f"StateSaveLocation={state}",
        f"SlurmdSpoolDir={spool}",
        f"SlurmctldPidFile={workdir / 'slurmctld.pid'}",
        f"SlurmdPidFile={workdir / 'slurmd.pid'}",
        f"SlurmctldLogFile={logs / 'slurmctld.log'}",
        f"SlurmdLogFile={logs / 'slurmd.log'}",
        "SlurmctldDebug=info",
        "SlurmdDebug=info",
        # No systemd and no cgroup setup here: track job processes by parent pid.
        "ProctrackType=proctrack/linuxproc",
        "TaskPlugin=task/none",
        "MpiDefault=none",
        "MailProg=/bin/true",
        "SelectType=select/cons_tres",
        "SelectTypeParameters=CR_Core_Memory",
        "SchedulerType=sched/backfill",
        "AccountingStorageType=accounting_storage/none",
        "JobAcctGatherType=jobacct_gather/none",
        "JobCompType=jobcomp/none",
        f"MinJobAge={MIN_JOB_AGE_SECONDS}",
        "ReturnToService=2",
        f"NodeName={node} NodeAddr=127.0.0.1 CPUs={cpus} RealMemory={memory_mb} State=UNKNOWN",
        f"PartitionName={PARTITION} Nodes={node} Default=YES MaxTime=INFINITE State=UP",
    ]
    conf = workdir / "slurm.conf"
    conf.write_text("\n".join(lines) + "\n")
    return conf


def _controller_alive(workdir: Path) -> bool:
    """Whether the slurmctld of the test cluster in ``workdir`` is still running."""
    try:
        pid = int((workdir / "slurmctld.pid").read_text().split()[0])
        return b"slurmctld" in Path(f"/proc/{pid}/cmdline").read_bytes()
    except (OSError, ValueError, IndexError):
        return False


def link_system_conf(conf: Path) -> None:
    """Point /etc/slurm/slurm.conf at ``conf``; never replace a real configuration."""
    link = SYSTEM_SLURM_CONF
    if link.is_symlink() and not _controller_alive(Path(os.readlink(link)).parent):
        link.unlink()  # left by a test cluster that was killed before its teardown
    if link.is_symlink() or link.exists():
        target = os.readlink(link) if link.is_symlink() else "a real file"
        raise ClusterError(
            f"SLURM test cluster: {link} is already in use ({target}); another test cluster "
            f"is running or this machine has its own SLURM configuration, which is left alone"
        )
    link.parent.mkdir(parents=True, exist_ok=True)
    link.symlink_to(conf)


def unlink_system_conf(conf: Path) -> None:
    link = SYSTEM_SLURM_CONF
    if link.is_symlink() and os.readlink(link) == str(conf):
        link.unlink()


# --------------------------------------------------------------------------- daemons


def _munge_works() -> bool:
    try:
        cred = subprocess.run([_which("munge"), "-n"], capture_output=True, timeout=10)
        if cred.returncode != 0:
            return False
        check = subprocess.run(
            [_which("unmunge")], input=cred.stdout, capture_output=True, timeout=10
        )
        return check.returncode == 0
    except (OSError, subprocess.TimeoutExpired):
        return False


def _prepare_munge() -> None:
    user = pwd.getpwnam("munge")
    MUNGE_RUN_DIR.mkdir(parents=True, exist_ok=True)
    os.chown(MUNGE_RUN_DIR, user.pw_uid, user.pw_gid)
    MUNGE_RUN_DIR.chmod(0o755)
    if not MUNGE_KEY.exists():
        MUNGE_KEY.parent.mkdir(parents=True, exist_ok=True)
        subprocess.run(
            [_which("mungekey"), "--create", "--keyfile", str(MUNGE_KEY)], check=True, timeout=30
        )
    os.chown(MUNGE_KEY, user.pw_uid, user.pw_gid)
    MUNGE_KEY.chmod(0o400)


def _start(
    command: Sequence[str], log: Path, env: dict[str, str], user: str | None = None
) -> subprocess.Popen:
    with open(log, "ab") as out:
        return subprocess.Popen(
            list(command),
            stdin=subprocess.DEVNULL,
            stdout=out,
            stderr=subprocess.STDOUT,
            env=env,
            user=user,
            group=user,
            start_new_session=True,  # a Ctrl-C meant for pytest must not reach the daemons first
        )


def _stop(process: subprocess.Popen | None, grace: float = 10) -> None:
    if process is None or process.poll() is not None:
        return
    process.terminate()
    try:
        process.wait(timeout=grace)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait(timeout=grace)


def _tail(path: Path, lines: int = 25) -> str:
    try:
        return "\n".join(path.read_text(errors="replace").splitlines()[-lines:])
    except OSError:
        return "(no log)"


def _wait_until(condition, timeout: float, what: str, logs: Sequence[Path], processes=()) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if condition():
            return
        for process in processes:
            if process.poll() is not None:
                break
        else:
            time.sleep(0.2)
            continue
        break  # a daemon died: no use waiting on
    details = "\n".join(f"--- {log} ---\n{_tail(log)}" for log in logs)
    raise ClusterError(f"SLURM test cluster: {what} (waited up to {timeout:.0f} s)\n{details}")


def _node_state(cluster_env: dict[str, str], node: str) -> str:
    result = subprocess.run(
        [_which("sinfo"), "-h", "-N", "-n", node, "-o", "%T"],
        env=cluster_env,
        capture_output=True,
        text=True,
        timeout=10,
    )
    return result.stdout.strip().lower() if result.returncode == 0 else ""


def _processes_with_env(key: str, value: str) -> list[int]:
    """Pids whose environment holds key=value exactly (our SLURM_CONF is unique per workdir)."""
    wanted = f"{key}={value}".encode()
    pids = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit() or int(entry.name) == os.getpid():
            continue
        try:
            environ = (entry / "environ").read_bytes().split(b"\0")
        except OSError:
            continue
        if wanted in environ:
            pids.append(int(entry.name))
    return pids


def _teardown(cluster_env, node_processes, munged, workdir: Path, conf: Path) -> list[str]:
    """Cancel jobs, stop daemons, kill what is left, remove state. Returns problems seen."""
    problems = []
    slurmctld = node_processes.get("slurmctld")
    if slurmctld is not None and slurmctld.poll() is None:
        try:
            subprocess.run(
                [_which("scancel"), "--partition", PARTITION],
                env=cluster_env,
                capture_output=True,
                timeout=15,
            )
            deadline = time.monotonic() + 15
            while time.monotonic() < deadline:
                queue = subprocess.run(
                    [_which("squeue"), "-h", "-t", "PD,R,CG", "-o", "%i"],
                    env=cluster_env,
                    capture_output=True,
                    text=True,
                    timeout=10,
                )
                if queue.returncode != 0 or not queue.stdout.strip():
                    break
                time.sleep(0.5)
        except (OSError, subprocess.TimeoutExpired) as exc:
            problems.append(f"cancelling jobs: {exc}")
    for name in ("slurmd", "slurmctld"):
        try:
            _stop(node_processes.get(name))
        except Exception as exc:  # keep tearing down
            problems.append(f"stopping {name}: {exc}")
    # Job steps (slurmstepd and the jobs' own processes) detach from slurmd; they all
    # carry our SLURM_CONF, which names this workdir and nothing else.
    for pid in _processes_with_env("SLURM_CONF", str(conf)):
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.kill(pid, signal.SIGKILL)
            problems.append(f"killed leftover process {pid}")
    if munged is not None:
        try:
            _stop(munged)
        except Exception as exc:
            problems.append(f"stopping munged: {exc}")
    unlink_system_conf(conf)
    for folder in ("state", "spool"):
        shutil.rmtree(workdir / folder, ignore_errors=True)
    return problems


@contextlib.contextmanager
def one_node_slurm(workdir: Path | str, start_timeout: float = 60) -> Iterator[Cluster]:
    """Bring up a one-node SLURM cluster under ``workdir``; always tear it down.

    Logs (kept after teardown): ``workdir/logs/{apt,munged,slurmctld,slurmd}.log``.
    """
    workdir = Path(workdir).resolve()
    logs = workdir / "logs"
    logs.mkdir(parents=True, exist_ok=True)
    install_seconds = ensure_packages(logs / "apt.log")

    started = time.monotonic()
    node, cpus, memory = node_name(), os.cpu_count() or 1, real_memory_mb()
    conf = write_slurm_conf(workdir, node, cpus, memory)
    env = dict(os.environ, SLURM_CONF=str(conf))
    processes: dict[str, subprocess.Popen] = {}
    munged = None
    link_system_conf(conf)
    try:
        if not _munge_works():  # reuse a munged that is already serving, never stop it
            _prepare_munge()
            munged = _start(
                [_which("munged"), "--foreground", "--force"],
                logs / "munged.log",
                dict(os.environ),
                user="munge",
            )
            _wait_until(_munge_works, 15, "munged did not answer", [logs / "munged.log"], [munged])
        processes["slurmctld"] = _start(
            [_which("slurmctld"), "-D", "-f", str(conf)], logs / "slurmctld.out", env
        )
        _wait_until(
            lambda: (
                subprocess.run(
                    [_which("scontrol"), "ping"],
                    env=env,
                    capture_output=True,
                    text=True,
                    timeout=10,
                ).stdout.count("UP")
                > 0
            ),
            start_timeout,
            "slurmctld did not come up",
            [logs / "slurmctld.out", logs / "slurmctld.log"],
            [processes["slurmctld"]],
        )
        processes["slurmd"] = _start(
            [_which("slurmd"), "-D", "-f", str(conf)], logs / "slurmd.out", env
        )
        _wait_until(
            lambda: _node_state(env, node) in ("idle", "mixed", "allocated"),
            start_timeout,
            f"node {node} did not become idle (state: {_node_state(env, node)!r})",
            [logs / "slurmd.out", logs / "slurmd.log", logs / "slurmctld.log"],
            [processes["slurmctld"], processes["slurmd"]],
        )
        cluster = Cluster(
            workdir=workdir,
            conf=conf,
            node=node,
            partition=PARTITION,
            cpus=cpus,
            real_memory_mb=memory,
            env=env,
            install_seconds=install_seconds,
            bringup_seconds=time.monotonic() - started,
        )
        yield cluster
    finally:
        problems = _teardown(env, processes, munged, workdir, conf)
        if problems:
            print("SLURM test cluster teardown: " + "; ".join(problems), file=sys.stderr)


# --------------------------------------------------------------------------- snakemake


@dataclasses.dataclass
class SnakemakeRun:
    returncode: int
    seconds: float
    log: Path
    timed_out: bool

    def output(self, lines: int = 60) -> str:
        return _tail(self.log, lines)


def run_snakemake_bounded(
    args: Sequence[str],
    cwd: Path,
    timeout: float,
    env: dict[str, str] | None = None,
    log: Path | None = None,
    grace: float = 60,
) -> SnakemakeRun:
    """Run ``python -m snakemake *args``; after ``timeout`` s send SIGINT, after ``grace`` more SIGKILL.

    SIGINT lets Snakemake cancel the SLURM jobs it submitted. Output goes to ``log``.
    """
    cwd = Path(cwd)
    log = Path(log) if log is not None else cwd / "snakemake-run.log"
    started = time.monotonic()
    timed_out = False
    with open(log, "wb") as out:
        process = subprocess.Popen(
            [sys.executable, "-m", "snakemake", *args],
            cwd=cwd,
            env=env,
            stdin=subprocess.DEVNULL,
            stdout=out,
            stderr=subprocess.STDOUT,
        )
        try:
            process.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            timed_out = True
            process.send_signal(signal.SIGINT)
            try:
                process.wait(timeout=grace)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait()
    return SnakemakeRun(process.returncode, time.monotonic() - started, log, timed_out)


def main(argv: Sequence[str]) -> int:
    """Time one bring-up and teardown; with --hold, keep the cluster until Ctrl-C."""
    import tempfile

    hold = "--hold" in argv
    workdir = Path(tempfile.mkdtemp(prefix="mkf-slurm-"))
    t0 = time.monotonic()
    with one_node_slurm(workdir) as cluster:
        print(
            f"install: {cluster.install_seconds:.1f} s  bring-up: {cluster.bringup_seconds:.1f} s  "
            f"node {cluster.node}: {cluster.cpus} CPUs, {cluster.real_memory_mb} MiB"
        )
        print(cluster.run("sinfo").stdout, end="")
        if hold:
            print(
                f"export SLURM_CONF={cluster.conf}   # Ctrl-C or SIGTERM to tear down", flush=True
            )
            for signum in (signal.SIGINT, signal.SIGTERM):
                signal.signal(signum, signal.default_int_handler)
            with contextlib.suppress(KeyboardInterrupt):
                while True:
                    time.sleep(3600)
        t1 = time.monotonic()
    print(
        f"teardown: {time.monotonic() - t1:.1f} s  total: {time.monotonic() - t0:.1f} s  logs: {workdir / 'logs'}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
