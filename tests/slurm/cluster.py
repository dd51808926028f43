"""``LocalSlurm``: a real one-node SLURM, started for a test and stopped after it.

Why: submitit (and hydra's submitit launcher on top of it) submit with sbatch, poll with
sacct and read result pickles; only a real scheduler shows whether a sweep survives that.
Usage::

    with LocalSlurm() as cluster:
        executor = cluster.executor(tmp_path / "submitit")
        job = executor.submit(pow, 2, 5)
        cluster.wait_for_jobs([job], timeout_s=120)  # job.result() alone has no time limit
        assert job.result() == 32

Everything (config, munge key, state, logs, MariaDB data) lives below one fresh folder;
every daemon is our child, ended by pid on exit, and every wait is bounded.
"""

from __future__ import annotations

import os
import secrets
import shutil
import socket
import subprocess
import tempfile
import time
from pathlib import Path
from types import TracebackType
from typing import TYPE_CHECKING, Any

from .config import (
    ClusterLayout,
    mysql_setup_sql,
    slurm_conf_text,
    slurmdbd_conf_text,
)
from .packages import SlurmInstallError, available, install, missing_packages, program
from .procs import (
    MARKER_ENV,
    carries_marker,
    end_child,
    end_pid,
    end_pids,
    marked_pids,
    pid_alive,
    port_free,
    read_pid_file,
    run,
    start_daemon,
    tail,
    unused_port,
    wait_until,
)

if TYPE_CHECKING:
    import submitit

__all__ = [
    "LocalSlurm",
    "SlurmInstallError",
    "available",
    "install",
    "missing_packages",
    "DEFAULT_BASE_DIR",
]

DEFAULT_BASE_DIR = Path(tempfile.gettempdir()) / "seedsweep-slurm"
_OWNER_FILE = "owner.pid"
_ACTIVE_ROOTS: set[Path] = set()  # clusters running in this process: never reaped


def reap_stale_runs(base_dir: Path, stop_timeout_s: float = 3.0) -> list[Path]:
    """End the processes of clusters whose owning Python process has died; drop their files.

    Only processes carrying that run's marker are ended, one by one by pid.
    """
    reaped: list[Path] = []
    if not base_dir.is_dir():
        return reaped
    for run_dir in sorted(base_dir.glob("run-*")):
        owner = read_pid_file(run_dir / _OWNER_FILE)
        if run_dir in _ACTIVE_ROOTS:
            continue
        if owner is not None and owner != os.getpid() and pid_alive(owner):
            continue
        end_pids(marked_pids(run_dir), stop_timeout_s)
        shutil.rmtree(run_dir, ignore_errors=True)
        reaped.append(run_dir)
    return reaped


class LocalSlurm:
    """Context manager: install (if needed), start, hand out executors, stop everything.

    Start it from the thread that lives as long as the cluster: the daemons get SIGTERM
    when the starting thread ends (so a killed test run leaves no daemons behind).
    """

    def __init__(
        self,
        *,
        accounting: bool = True,
        node_name: str = "seedsweep-node",
        cpus: int = 2,
        real_memory_mb: int = 1000,
        partition: str = "debug",
        ctld_port: int = 6817,
        slurmd_port: int = 6818,
        dbd_port: int = 6819,
        base_dir: Path = DEFAULT_BASE_DIR,
        install_packages: bool = True,
        keep_files: bool = False,
        start_timeout_s: float = 60.0,
        stop_timeout_s: float = 20.0,
    ) -> None:
        self.accounting = accounting
        self.node_name = node_name
        self.cpus = cpus
        self.real_memory_mb = real_memory_mb
        self.partition = partition
        self.ports = {"slurmctld": ctld_port, "slurmd": slurmd_port}
        if accounting:
            self.ports["slurmdbd"] = dbd_port
        self.base_dir = Path(base_dir)
        self.install_packages = install_packages
        self.keep_files = keep_files
        self.start_timeout_s = start_timeout_s
        self.stop_timeout_s = stop_timeout_s
        self.layout: ClusterLayout | None = None
        self.timings: dict[str, float] = {}
        self.leftovers: list[int] = []  # pids found and ended after the daemons stopped
        self._children: dict[str, subprocess.Popen[bytes]] = {}
        self._saved_env: dict[str, str | None] = {}

    # ----- what callers use -------------------------------------------------------------

    @property
    def job_mem_mb(self) -> int:
        """Memory per one-CPU job: the node's memory split evenly over its CPUs."""
        return self.real_memory_mb // self.cpus

    def env(self) -> dict[str, str]:
        """Environment for clients (sbatch, sacct, submitit, a hydra app) of this cluster."""
        layout = self._require_layout()
        return dict(os.environ, SLURM_CONF=str(layout.slurm_conf), **{MARKER_ENV: str(layout.root)})

    def submitit_params(self) -> dict[str, Any]:
        """AutoExecutor parameters that fit the node (sbatch rejects memory above RealMemory)."""
        return {
            "slurm_partition": self.partition,
            "timeout_min": 5,
            "cpus_per_task": 1,
            "mem_gb": self.job_mem_mb / 1024,
        }

    def executor(self, folder: Path | str, **params: Any) -> submitit.AutoExecutor:
        """A submitit AutoExecutor for this cluster; use a fresh ``folder`` per test.

        (Job ids restart at 1 with every new cluster, so a reused folder can hold a stale
        result under the same id.)
        """
        import submitit

        self._require_layout()
        executor = submitit.AutoExecutor(folder=folder, cluster="slurm")
        executor.update_parameters(**{**self.submitit_params(), **params})
        return executor

    def hydra_launcher_params(self) -> dict[str, Any]:
        """``hydra.launcher`` values (submitit_slurm) that fit this node.

        hydra's ``mem_gb`` is an int, so memory is given per CPU instead.
        """
        return {
            "partition": self.partition,
            "cpus_per_task": 1,
            "mem_per_cpu": f"{self.job_mem_mb}M",
            "timeout_min": 5,
        }

    def hydra_launcher_overrides(self) -> list[str]:
        """Command-line overrides selecting hydra's submitit_slurm launcher for this node."""
        params = self.hydra_launcher_params()
        return ["hydra/launcher=submitit_slurm"] + [
            f"hydra.launcher.{key}={value}" for key, value in params.items()
        ]

    def queue(self) -> list[str]:
        """Ids of jobs the controller still knows as pending or running."""
        result = run(["squeue", "-h", "-o", "%i"], self.env(), timeout_s=15.0)
        return result.stdout.split()

    def job_states(self) -> dict[str, str]:
        """Job id -> state from accounting (sacct), e.g. {"1_0": "COMPLETED"}."""
        result = run(
            ["sacct", "-n", "-X", "-P", "-S", "now-7days", "-o", "JobID,State"], self.env(), 15.0
        )
        pairs = (line.split("|", 1) for line in result.stdout.splitlines() if "|" in line)
        return {job_id: state for job_id, state in pairs}

    def wait_for_jobs(self, jobs: list[Any], timeout_s: float, poll_s: float = 0.5) -> float:
        """Wait until every submitit job is done; return seconds waited.

        Why: ``job.result()`` has no time limit and waits forever for a job that died without
        a result when accounting is off. Past ``timeout_s`` the jobs are cancelled and a
        TimeoutError names their states and the end of their stderr logs.
        """
        start = time.monotonic()
        last_forced = start
        while True:
            now = time.monotonic()
            force = now - last_forced > 2.0  # ask sacct now and then, not on every poll
            if force:
                last_forced = now
            if all(job.done(force_check=force) for job in jobs):
                return time.monotonic() - start
            if now - start > timeout_s:
                break
            time.sleep(poll_s)
        details = [f"squeue: {self.queue()}"]
        if self.accounting:
            details.append(f"sacct: {self.job_states()}")
        for job in jobs:
            details.append(f"--- {job.job_id} stderr:\n{tail(Path(job.paths.stderr), 10)}")
        run(["scancel", *[str(job.job_id) for job in jobs]], self.env(), 15.0, check=False)
        raise TimeoutError(f"jobs not done within {timeout_s:.0f} s\n" + "\n".join(details))

    # ----- context manager ----------------------------------------------------------------

    def __enter__(self) -> LocalSlurm:
        self.start()
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        problems = self.stop()
        if problems and exc_type is None:
            raise RuntimeError("LocalSlurm did not stop cleanly: " + "; ".join(problems))

    def start(self) -> None:
        """Install if needed, then start munged, [MariaDB, slurmdbd,] slurmctld and slurmd."""
        began = time.monotonic()
        if self.install_packages:
            installed = install(accounting=self.accounting)
            self.timings["install_s"] = time.monotonic() - began
            self.timings["installed_packages"] = float(len(installed))
        missing = missing_packages(self.accounting)
        if missing:
            raise SlurmInstallError(f"Slurm packages not installed: {' '.join(missing)}")
        reap_stale_runs(self.base_dir)
        try:
            self._wait_ports_free(timeout_s=10.0)
        except TimeoutError as err:
            raise RuntimeError(
                f"{err}: another Slurm (or other program) holds it; stop that one or pass "
                "other ctld_port/slurmd_port/dbd_port to LocalSlurm"
            ) from err
        self.layout = self._make_layout()
        _ACTIVE_ROOTS.add(self.layout.root)
        self._set_client_env()
        started = time.monotonic()
        try:
            self._write_files()
            self._start_munged()
            if self.accounting:
                self._start_mariadb()
                self._start_slurmdbd()
            self._start_slurmctld()
            self._start_slurmd()
            if self.accounting:
                self._wait_accounting()
        except BaseException:
            self.stop(remove_files=False)
            raise
        self.timings["start_s"] = time.monotonic() - started

    def stop(self, remove_files: bool | None = None) -> list[str]:
        """Cancel jobs, end every daemon and leftover by pid, free the ports; return problems."""
        began = time.monotonic()
        problems: list[str] = []
        layout = self.layout
        if layout is None or layout.root not in _ACTIVE_ROOTS:
            return problems  # never started, or stopped already
        if "slurmctld" in self._children and self._children["slurmctld"].poll() is None:
            problems += self._cancel_all_jobs()
        for name in reversed(list(self._children)):
            end_child(self._children[name], self.stop_timeout_s)
        self._children.clear()
        for pid_file in layout.run_dir.glob("*.pid"):
            pid = read_pid_file(pid_file)
            if pid is not None and carries_marker(pid, layout.root):
                end_pid(pid, self.stop_timeout_s)
        self.leftovers = marked_pids(layout.root)
        end_pids(self.leftovers, self.stop_timeout_s)
        still_alive = [pid for pid in self.leftovers if pid_alive(pid)]
        if still_alive:
            problems.append(f"processes still alive after SIGKILL: {still_alive}")
        try:
            self._wait_ports_free(timeout_s=self.stop_timeout_s, with_mysql=True)
        except TimeoutError as err:
            problems.append(str(err))
        self._restore_client_env()
        _ACTIVE_ROOTS.discard(layout.root)
        keep = self.keep_files if remove_files is None else not remove_files
        if not keep:
            shutil.rmtree(layout.root, ignore_errors=True)
        self.timings["stop_s"] = time.monotonic() - began
        return problems

    # ----- start steps ------------------------------------------------------------------

    def _make_layout(self) -> ClusterLayout:
        self.base_dir.mkdir(parents=True, exist_ok=True)
        self.base_dir.chmod(0o755)
        root = Path(tempfile.mkdtemp(prefix="run-", dir=self.base_dir))
        root.chmod(0o755)  # munged refuses a socket folder that is not 0755 up the tree
        (root / _OWNER_FILE).write_text(f"{os.getpid()}\n")
        return ClusterLayout(
            root=root,
            hostname=socket.gethostname().split(".")[0],
            node_name=self.node_name,
            cpus=self.cpus,
            real_memory_mb=self.real_memory_mb,
            partition=self.partition,
            cluster_name="seedsweep",
            ctld_port=self.ports["slurmctld"],
            slurmd_port=self.ports["slurmd"],
            dbd_port=self.ports.get("slurmdbd", 6819),
            mysql_port=unused_port() if self.accounting else 0,
            mysql_password=secrets.token_hex(12),
        )

    def _write_files(self) -> None:
        layout = self._require_layout()
        for folder in (
            layout.etc,
            layout.log_dir,
            layout.run_dir,
            layout.state_dir,
            layout.spool_dir,
            layout.munge_dir,
        ):
            folder.mkdir(mode=0o755, exist_ok=True)
            folder.chmod(0o755)
        layout.munge_key.write_bytes(secrets.token_bytes(1024))
        layout.munge_key.chmod(0o400)
        layout.slurm_conf.write_text(slurm_conf_text(layout, self.accounting))
        if self.accounting:
            layout.slurmdbd_conf.write_text(slurmdbd_conf_text(layout))
            layout.slurmdbd_conf.chmod(0o600)  # slurmdbd refuses a readable password file

    def _start(self, name: str, argv: list[str]) -> subprocess.Popen[bytes]:
        layout = self._require_layout()
        proc = start_daemon(argv, layout.log_file(f"{name}.out"), self.env(), layout.root)
        self._children[name] = proc
        return proc

    def _exited(self, name: str, log_name: str | None = None) -> Any:
        """A ``still_starting`` callback: the reason to stop waiting if ``name`` exited."""
        layout = self._require_layout()
        proc = self._children[name]
        log_path = layout.log_file(log_name or name)

        def check() -> str | None:
            if proc.poll() is None:
                return None
            out_log = layout.log_file(f"{name}.out")
            return (
                f"{name} exited with status {proc.returncode}\n"
                f"--- {log_path}\n{tail(log_path)}\n--- {out_log}\n{tail(out_log)}"
            )

        return check

    def _timed_wait(self, name: str, condition: Any, what: str, key: str = "") -> None:
        """Wait for ``condition`` while daemon ``name`` runs; record the wait as ``key``."""
        try:
            waited = wait_until(condition, self.start_timeout_s, what, self._exited(name))
        except TimeoutError as err:
            log_path = self._require_layout().log_file(name)
            raise TimeoutError(f"{err}\n--- {log_path}\n{tail(log_path)}") from err
        self.timings[key or f"{name}_ready_s"] = waited

    def _start_munged(self) -> None:
        layout = self._require_layout()
        self._start(
            "munged",
            [
                program("munged") or "munged",
                "--foreground",
                "--force",
                f"--socket={layout.munge_socket}",
                f"--key-file={layout.munge_key}",
                f"--pid-file={layout.pid_file('munged')}",
                f"--log-file={layout.log_file('munged')}",
                f"--seed-file={layout.run_dir / 'munged.seed'}",
            ],
        )
        self._timed_wait("munged", layout.munge_socket.exists, "munged socket")

    def _start_mariadb(self) -> None:
        layout = self._require_layout()
        layout.mysql_dir.mkdir(mode=0o755, exist_ok=True)
        began = time.monotonic()
        run(
            [
                program("mariadb-install-db") or "mariadb-install-db",
                "--no-defaults",
                f"--datadir={layout.mysql_dir}",
                "--user=root",
                "--skip-test-db",
                "--auth-root-authentication-method=socket",
            ],
            self.env(),
            timeout_s=self.start_timeout_s,
        )
        self.timings["mariadb_init_s"] = time.monotonic() - began
        self._start(
            "mariadbd",
            [
                program("mariadbd") or "mariadbd",
                "--no-defaults",
                f"--datadir={layout.mysql_dir}",
                f"--socket={layout.mysql_socket}",
                f"--port={layout.mysql_port}",
                "--bind-address=127.0.0.1",
                "--user=root",
                f"--pid-file={layout.pid_file('mariadbd')}",
                f"--log-error={layout.log_file('mariadbd')}",
                "--innodb-buffer-pool-size=64M",
                "--skip-log-bin",
            ],
        )
        client = [
            program("mariadb") or "mariadb",
            "--no-defaults",
            f"--socket={layout.mysql_socket}",
            "-u",
            "root",
        ]

        def answers() -> bool:
            return run([*client, "-e", "SELECT 1"], self.env(), 10.0, check=False).returncode == 0

        self._timed_wait("mariadbd", answers, "MariaDB answering")
        run([*client, "-e", mysql_setup_sql(layout.mysql_password)], self.env(), 30.0)

    def _start_slurmdbd(self) -> None:
        layout = self._require_layout()
        self._start("slurmdbd", [program("slurmdbd") or "slurmdbd", "-D"])
        port = layout.dbd_port
        self._timed_wait("slurmdbd", lambda: not port_free(port), f"slurmdbd on port {port}")

    def _start_slurmctld(self) -> None:
        layout = self._require_layout()
        self._start(
            "slurmctld", [program("slurmctld") or "slurmctld", "-D", "-f", str(layout.slurm_conf)]
        )

        def up() -> bool:
            result = run(["scontrol", "ping"], self.env(), 10.0, check=False)
            return result.returncode == 0 and "is UP" in result.stdout

        self._timed_wait("slurmctld", up, "slurmctld answering scontrol ping")

    def _start_slurmd(self) -> None:
        layout = self._require_layout()
        self._start(
            "slurmd",
            [
                program("slurmd") or "slurmd",
                "-D",
                "-N",
                layout.node_name,
                "-f",
                str(layout.slurm_conf),
            ],
        )

        def idle() -> bool:
            result = run(
                ["sinfo", "-h", "-N", "-n", layout.node_name, "-o", "%T"],
                self.env(),
                10.0,
                check=False,
            )
            return result.stdout.strip() == "idle"

        self._timed_wait("slurmd", idle, f"sinfo showing {layout.node_name} idle")

    def _wait_accounting(self) -> None:
        """Wait until sacct can reach slurmdbd and the cluster is registered there."""

        def registered() -> bool:
            result = run(
                ["sacctmgr", "-n", "-P", "list", "cluster", "format=Cluster"],
                self.env(),
                10.0,
                check=False,
            )
            return "seedsweep" in result.stdout.split()

        self._timed_wait(
            "slurmdbd", registered, "cluster registered in slurmdbd", "accounting_ready_s"
        )

    # ----- stop steps -------------------------------------------------------------------

    def _cancel_all_jobs(self) -> list[str]:
        try:
            ids = self.queue()
            if ids:
                run(["scancel", *ids], self.env(), 15.0, check=False)
                wait_until(
                    lambda: not self.queue(), self.stop_timeout_s, "jobs cancelled", poll_s=0.2
                )
        except (RuntimeError, TimeoutError, subprocess.TimeoutExpired) as err:
            return [f"cancelling jobs: {err}"]
        return []

    def _wait_ports_free(self, timeout_s: float, with_mysql: bool = False) -> None:
        ports = dict(self.ports)
        if with_mysql and self.layout is not None and self.layout.mysql_port:
            ports["mariadbd"] = self.layout.mysql_port
        for name, port in ports.items():
            wait_until(
                lambda port=port: port_free(port),
                timeout_s,
                f"port {port} ({name}) free",
                poll_s=0.1,
            )

    # ----- environment ------------------------------------------------------------------

    def _set_client_env(self) -> None:
        """Point this process's clients (and so submitit's sbatch/sacct calls) at us."""
        layout = self._require_layout()
        for key, value in (("SLURM_CONF", str(layout.slurm_conf)), (MARKER_ENV, str(layout.root))):
            self._saved_env[key] = os.environ.get(key)
            os.environ[key] = value

    def _restore_client_env(self) -> None:
        for key, value in self._saved_env.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value
        self._saved_env.clear()

    def _require_layout(self) -> ClusterLayout:
        if self.layout is None:
            raise RuntimeError("LocalSlurm is not started; use it as `with LocalSlurm() as c:`")
        return self.layout
