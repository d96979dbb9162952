"""How a workflow run starts and resumes.

Two things the workflow does before any job runs, both from
``liqpanel/workflow/rules/common.smk``:

* It fixes the size of the table engine's thread pool (``run.engine_threads``
  in the config). Polars splits a group-by over its threads and adds the
  partial sums in thread order, so the last digit of a floating-point sum can
  depend on the number of threads. Fixing the pool (instead of letting it
  follow the machine's core count) is what makes the same inputs give
  byte-identical tables on machines with different numbers of cores. It must
  happen before polars is imported, which is why this module never imports
  polars at the top.
* It clears a lock left by a run that was killed. Snakemake locks the working
  directory while it runs; a run killed with SIGKILL (or by a crashed
  machine) leaves the lock behind and the next run refuses to start. The
  workflow records the process id of the run holding the lock
  (:func:`claim_lock`, called when jobs start) and, at the next start, removes
  the lock if that process no longer exists on this machine
  (:func:`clear_stale_lock`). A lock held by a live process, or by a process on
  another machine, is left alone.
"""

from __future__ import annotations

import json
import os
import socket
import sys
from pathlib import Path

from liqpanel.core.errors import ConfigError

LOCK_DIR = Path(".snakemake") / "locks"
OWNER_FILE = Path(".snakemake") / "liqpanel-lock-owner.json"


def engine_threads_default() -> int:
    """The schema's default for ``run.engine_threads``."""
    from liqpanel.core.schema import load_schema

    return load_schema()["properties"]["run"]["properties"]["engine_threads"]["default"]


def pin_engine_threads(config: dict | None) -> int | None:
    """Fix polars' thread pool to ``run.engine_threads`` before polars is imported.

    Returns the pool size, or None when the value is not a positive integer
    (the schema check that follows names the key). Raises ConfigError if
    polars was already imported with a pool of another size.
    """
    run = (config or {}).get("run") or {}
    threads = run.get("engine_threads", engine_threads_default()) if isinstance(run, dict) else None
    if not isinstance(threads, int) or isinstance(threads, bool) or threads < 1:
        return None
    if "polars" in sys.modules:
        actual = sys.modules["polars"].thread_pool_size()
        if actual != threads:
            raise ConfigError(
                f"run.engine_threads is {threads} but the table engine was already started with {actual} "
                "threads in this process; start the workflow in a fresh process (make demo, liqpanel run)"
            )
        return threads
    os.environ["POLARS_MAX_THREADS"] = str(threads)
    return threads


CHECKED_ENV = "LIQPANEL_CHECKED_CONFIG"


def config_digest(config: dict | None) -> str:
    """A fingerprint of a config as written: the workflow skips the pre-flight check of a config
    the command line has just checked (``liqpanel run`` passes it in :data:`CHECKED_ENV`)."""
    import hashlib

    text = json.dumps(config, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def already_checked(config: dict | None) -> bool:
    return os.environ.get(CHECKED_ENV) == config_digest(config)


WORK_STAMP = "engine.json"


def _engine(threads: int) -> dict:
    import liqpanel

    return {"engine_threads": threads, "liqpanel": liqpanel.__version__}


def check_work_folder(work_dir: str | Path, threads: int) -> None:
    """Stop when ``work_dir`` holds files made with other engine settings.

    Snakemake reruns a job when its inputs or parameters change, not when the
    thread pool or the package version does; reusing such files would give
    tables that differ in the last digits under a run-id that says otherwise.
    """
    stamp = Path(work_dir) / WORK_STAMP
    if not stamp.exists():
        return
    try:
        made = json.loads(stamp.read_text())
    except ValueError:
        made = {}
    if made != _engine(threads):
        raise ConfigError(
            f"{work_dir}/ holds intermediate files made with {made} but this run uses {_engine(threads)}; "
            f"remove {work_dir}/ (make clean-work) so that every stage runs again"
        )


def stamp_work_folder(work_dir: str | Path, threads: int) -> None:
    """Record the engine settings the files in ``work_dir`` are made with."""
    stamp = Path(work_dir) / WORK_STAMP
    stamp.parent.mkdir(parents=True, exist_ok=True)
    stamp.write_text(json.dumps(_engine(threads), sort_keys=True) + "\n")


def _process_alive(pid: int) -> bool:
    """True while ``pid`` runs; a killed process not yet reaped (a zombie) counts as gone."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return True  # no /proc (not Linux): trust the signal check
    return state not in ("Z", "X")


def claim_lock(workdir: str | Path = ".") -> None:
    """Record this process as the holder of the working directory's lock."""
    owner = Path(workdir) / OWNER_FILE
    owner.parent.mkdir(parents=True, exist_ok=True)
    owner.write_text(json.dumps({"pid": os.getpid(), "host": socket.gethostname()}) + "\n")


def release_lock(workdir: str | Path = ".") -> None:
    """Forget the lock holder (Snakemake removes the lock itself on exit)."""
    owner = Path(workdir) / OWNER_FILE
    if owner.exists():
        owner.unlink()


def clear_stale_lock(workdir: str | Path = ".") -> bool:
    """Remove the lock of a killed run; True when one was removed.

    The lock is stale when the recorded holder ran on this machine and its
    process is gone. Without a record, or with a live holder, nothing is done.
    """
    workdir = Path(workdir)
    owner = workdir / OWNER_FILE
    locks = sorted((workdir / LOCK_DIR).glob("*.lock")) if (workdir / LOCK_DIR).is_dir() else []
    if not owner.exists():
        return False
    try:
        holder = json.loads(owner.read_text())
        pid, host = int(holder["pid"]), str(holder["host"])
    except (ValueError, KeyError, TypeError):
        return False
    if host != socket.gethostname() or pid == os.getpid() or _process_alive(pid):
        return False
    for lock in locks:
        lock.unlink(missing_ok=True)
    owner.unlink(missing_ok=True)
    if locks:
        sys.stderr.write(f"liqpanel: removed the lock left by an interrupted run (process {pid} is gone)\n")
    return bool(locks)


def remove_partial_files(*folders: str | Path) -> int:
    """Delete the temporary ``.part`` files a killed run left behind; how many.

    Outputs are written to ``.<name>.<random>.part`` and moved into place when
    complete (``liqpanel.core.io.atomic_path``), so these are never read; this only
    tidies up. Call it only when no other run is writing (a stale lock was
    just cleared).
    """
    removed = 0
    for folder in folders:
        for part in Path(folder).rglob(".*.part") if Path(folder).is_dir() else []:
            part.unlink(missing_ok=True)
            removed += 1
    return removed


HOLD_FILE = ".liqpanel-run-in-progress"


def hold_folders(*folders: str | Path) -> list[Path]:
    """Keep the user's own folders from being removed while the workflow runs; the files written.

    When a run ends, Snakemake removes every empty folder that should have
    held a missing input or output, and its empty parents with it, so a run
    that failed early took the user's empty results folder away. A small
    hidden file in each folder that already exists keeps it (and its parents)
    non-empty until :func:`release_folders` removes the file again.
    """
    held = []
    for folder in folders:
        folder = Path(folder)
        if folder.is_dir():
            marker = folder / HOLD_FILE
            marker.write_text(f"{os.getpid()}\n")
            held.append(marker)
    return held


def release_folders(held: list[Path]) -> None:
    """Remove the files :func:`hold_folders` wrote (the folders stay)."""
    for marker in held:
        marker.unlink(missing_ok=True)
