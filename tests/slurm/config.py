"""Configuration files for a one-node SLURM on 127.0.0.1 (Debian's Slurm 22.05).

Why these settings: the machines this runs on have neither systemd nor usable cgroups, so
process tracking is by /proc (proctrack/linuxproc) and tasks are not confined (task/none);
every daemon runs as root on files under one temporary folder; scheduling delays are cut
so a handful of tiny jobs finishes in seconds.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path


@dataclass(frozen=True)
class ClusterLayout:
    """Where one cluster keeps its files (all below ``root``) and which ports it uses."""

    root: Path
    hostname: str
    node_name: str
    cpus: int
    real_memory_mb: int
    partition: str
    cluster_name: str
    ctld_port: int
    slurmd_port: int
    dbd_port: int
    mysql_port: int
    mysql_password: str

    @property
    def etc(self) -> Path:
        return self.root / "etc"

    @property
    def slurm_conf(self) -> Path:
        return self.etc / "slurm.conf"

    @property
    def slurmdbd_conf(self) -> Path:
        # slurmdbd has no -f option: it reads slurmdbd.conf beside $SLURM_CONF.
        return self.etc / "slurmdbd.conf"

    @property
    def munge_dir(self) -> Path:
        return self.root / "munge"

    @property
    def munge_socket(self) -> Path:
        return self.munge_dir / "munge.socket.2"

    @property
    def munge_key(self) -> Path:
        return self.etc / "munge.key"

    @property
    def log_dir(self) -> Path:
        return self.root / "log"

    @property
    def run_dir(self) -> Path:
        return self.root / "run"

    @property
    def state_dir(self) -> Path:
        return self.root / "state"

    @property
    def spool_dir(self) -> Path:
        return self.root / "spool"

    @property
    def mysql_dir(self) -> Path:
        return self.root / "mysql"

    @property
    def mysql_socket(self) -> Path:
        return self.run_dir / "mysqld.sock"

    def pid_file(self, daemon: str) -> Path:
        return self.run_dir / f"{daemon}.pid"

    def log_file(self, daemon: str) -> Path:
        return self.log_dir / f"{daemon}.log"


def slurm_conf_text(layout: ClusterLayout, accounting: bool) -> str:
    """slurm.conf for one node; values from slurm.conf(5) of Slurm 22.05."""
    mem_per_cpu = layout.real_memory_mb // layout.cpus
    lines = [
        f"ClusterName={layout.cluster_name}",
        f"SlurmctldHost={layout.hostname}(127.0.0.1)",
        f"SlurmctldPort={layout.ctld_port}",
        f"SlurmdPort={layout.slurmd_port}",
        "SlurmUser=root",
        "SlurmdUser=root",
        "AuthType=auth/munge",
        "CredType=cred/munge",
        f"AuthInfo=socket={layout.munge_socket}",
        f"StateSaveLocation={layout.state_dir}",
        f"SlurmdSpoolDir={layout.spool_dir}",
        f"SlurmctldPidFile={layout.pid_file('slurmctld')}",
        f"SlurmdPidFile={layout.pid_file('slurmd')}",
        f"SlurmctldLogFile={layout.log_file('slurmctld')}",
        f"SlurmdLogFile={layout.log_file('slurmd')}",
        "SlurmctldDebug=info",
        "SlurmdDebug=info",
        "ProctrackType=proctrack/linuxproc",
        "TaskPlugin=task/none",
        "JobAcctGatherType=jobacct_gather/none",
        "MpiDefault=none",
        "SwitchType=switch/none",
        "MailProg=/bin/true",
        "ReturnToService=2",
        "SlurmdParameters=config_overrides",
        "SelectType=select/cons_tres",
        "SelectTypeParameters=CR_Core_Memory",
        f"DefMemPerCPU={mem_per_cpu}",
        "SchedulerType=sched/backfill",
        "SchedulerParameters=batch_sched_delay=0",
        "KillWait=5",
        "InactiveLimit=0",
        "MinJobAge=300",
        "Waittime=0",
        "SlurmctldTimeout=30",
        "SlurmdTimeout=60",
    ]
    if accounting:
        lines += [
            "AccountingStorageType=accounting_storage/slurmdbd",
            "AccountingStorageHost=127.0.0.1",
            f"AccountingStoragePort={layout.dbd_port}",
            # For the slurmdbd plugin this field names the munge socket clients use (sacct).
            f"AccountingStoragePass={layout.munge_socket}",
        ]
    else:
        lines.append("AccountingStorageType=accounting_storage/none")
    lines += [
        f"NodeName={layout.node_name} NodeAddr=127.0.0.1 CPUs={layout.cpus} "
        f"RealMemory={layout.real_memory_mb} State=UNKNOWN",
        f"PartitionName={layout.partition} Nodes={layout.node_name} Default=YES "
        "MaxTime=INFINITE State=UP",
    ]
    return "\n".join(lines) + "\n"


def slurmdbd_conf_text(layout: ClusterLayout) -> str:
    """slurmdbd.conf talking to the private MariaDB; values from slurmdbd.conf(5)."""
    lines = [
        "AuthType=auth/munge",
        f"AuthInfo=socket={layout.munge_socket}",
        f"DbdHost={layout.hostname}",
        "DbdAddr=127.0.0.1",
        f"DbdPort={layout.dbd_port}",
        "SlurmUser=root",
        "DebugLevel=info",
        f"LogFile={layout.log_file('slurmdbd')}",
        f"PidFile={layout.pid_file('slurmdbd')}",
        "StorageType=accounting_storage/mysql",
        "StorageHost=127.0.0.1",
        f"StoragePort={layout.mysql_port}",
        "StorageUser=slurm",
        f"StoragePass={layout.mysql_password}",
        "StorageLoc=slurm_acct_db",
    ]
    return "\n".join(lines) + "\n"


def mysql_setup_sql(password: str) -> str:
    """SQL giving slurmdbd its own user and database in the private MariaDB."""
    users = ("'slurm'@'localhost'", "'slurm'@'127.0.0.1'")
    statements = ["CREATE DATABASE IF NOT EXISTS slurm_acct_db"]
    for user in users:
        statements.append(f"CREATE USER IF NOT EXISTS {user} IDENTIFIED BY '{password}'")
        statements.append(f"GRANT ALL ON slurm_acct_db.* TO {user}")
    return ";\n".join(statements) + ";\n"
