"""Partial results on disk and a progress line for :func:`perftest.reconcile_many`.

:class:`WindowStore` keeps the rows of a long job in a folder of Parquet files, one
file per finished chunk of windows, written as soon as the chunk is done.  Each
file name carries the chunk's key: a hash of everything its rows depend on (the
plant file text, the options, the window bounds and the chunk's input data), so a
rerun finds the chunks it has already done and skips them, while a chunk whose
input or options changed gets a new key and is computed again.  Files of keys that
the finished job no longer uses are removed at the end, so that the folder is then
one Parquet dataset of exactly the job's rows (``pandas.read_parquet(folder)``).

:class:`StoreLock` keeps a second job off an output folder while one works in it:
an operating-system lock on a file in the folder (``fcntl.flock`` on POSIX,
``msvcrt.locking`` on Windows), so a job that dies releases it with its process and
no stale lock is ever left behind; the file names the holder (process id, host,
start time) for the message of the job that is refused.

:class:`Progress` writes one throttled line to stderr: windows done, rate,
estimated time left and the count of failed windows.
"""

from __future__ import annotations

import hashlib
import json
import os
import socket
import sys
import time
from pathlib import Path

import pandas as pd

from perftest.errors import InputError, PerftestError

__all__ = ["WindowStore", "StoreLock", "Progress", "fingerprint"]

_PREFIX = "part-"


def fingerprint(*items) -> str:
    """A sha256 hex digest of JSON-able items (str() for the rest)."""
    text = json.dumps(items, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


class WindowStore:
    """A folder of Parquet files, one per finished chunk of windows.

    Parameters
    ----------
    folder : str or Path
        Created when missing.  It must hold nothing but this store's files.
    resume : bool, default True
        Reuse chunks already in the folder whose key matches; False computes
        every chunk again (and replaces the files).
    """

    def __init__(self, folder, resume: bool = True):
        self.folder = Path(folder)
        if self.folder.exists() and not self.folder.is_dir():
            raise InputError(
                f"The 'store' parameter of reconcile_many must be a folder. {self.folder} is "
                "a file.",
                parameter="store",
            )
        self.folder.mkdir(parents=True, exist_ok=True)
        strangers = [
            p.name
            for p in self.folder.iterdir()
            if not (p.name.startswith(_PREFIX) and p.suffix in (".parquet", ".tmp"))
            and p.name != StoreLock.NAME  # the job's lock (reconcile_many holds it)
        ]
        if strangers:
            raise InputError(
                f"The 'store' folder {self.folder} holds files that are not window results "
                f"({', '.join(sorted(strangers)[:3])}). Give an empty or a new folder.",
                parameter="store",
            )
        self.resume = resume
        self._existing = {self._key_of(p): p for p in self.folder.glob(f"{_PREFIX}*.parquet")}
        self.used: dict[str, Path] = {}

    @staticmethod
    def _key_of(path: Path) -> str:
        return path.stem.rsplit("-", 1)[-1]

    def path(self, run_number: int, start: pd.Timestamp, key: str) -> Path:
        stamp = start.tz_convert("UTC").strftime("%Y%m%dT%H%M%SZ")
        return self.folder / f"{_PREFIX}{run_number:04d}-{stamp}-{key[:20]}.parquet"

    def has(self, key: str) -> bool:
        return self.resume and key[:20] in self._existing

    def read(self, key: str) -> pd.DataFrame:
        path = self._existing[key[:20]]
        try:
            frame = pd.read_parquet(path)
        except Exception as exc:  # pyarrow raises its own classes for a damaged file
            detail = " ".join(str(exc).split())[:200]
            raise PerftestError(
                f"{path}: this part file of the window store cannot be read ({detail}). "
                "Delete it to compute its windows again, or rerun with --no-resume "
                "(resume=False).",
                file=path,
            ) from None
        self.used[key[:20]] = path
        return frame

    def write(self, run_number: int, start: pd.Timestamp, key: str, frame: pd.DataFrame) -> None:
        """Write one chunk's rows (atomically: a killed job leaves no half file)."""
        path = self.path(run_number, start, key)
        tmp = path.with_suffix(".tmp")
        frame.to_parquet(tmp, index=False)
        os.replace(tmp, path)
        self.used[key[:20]] = path

    def prune(self) -> list[Path]:
        """Remove the files of keys this job did not use; returns them."""
        gone = []
        for p in self.folder.iterdir():
            stale = p.suffix == ".tmp" or (
                p.suffix == ".parquet" and self.used.get(self._key_of(p)) != p
            )
            if stale:
                p.unlink()
                gone.append(p)
        return gone


class StoreLock:
    """An exclusive lock on an output folder, held for the length of a job.

    Parameters
    ----------
    folder : str or Path
        The folder (created when missing).  The lock file ``.perftest.lock`` in it
        is left in place after the job: removing it would let two later jobs lock
        two different files.
    job : str, default "perftest"
        What holds the lock, for the message of a job that is refused.

    Raises
    ------
    PerftestError
        On :meth:`acquire` (or entering the ``with`` block) when another process
        holds the lock; the message names its process id, host and start time.

    Examples
    --------
    >>> import tempfile
    >>> with StoreLock(tempfile.mkdtemp()) as lock:
    ...     lock.held
    True
    """

    NAME = ".perftest.lock"

    def __init__(self, folder, job: str = "perftest"):
        self.folder = Path(folder)
        self.path = self.folder / self.NAME
        self.job = job
        self._fh = None

    @property
    def held(self) -> bool:
        return self._fh is not None

    def acquire(self) -> StoreLock:
        if self.folder.exists() and not self.folder.is_dir():
            raise PerftestError(
                f"{self.folder}: this is a file; {self.job} needs a folder here. Give a "
                "new or an empty folder.",
                file=self.folder,
            )
        self.folder.mkdir(parents=True, exist_ok=True)
        fh = open(self.path, "a+b")  # noqa: SIM115 - kept open while the lock is held
        try:
            _lock(fh)
        except OSError:
            fh.seek(0)
            holder = fh.read().decode("utf-8", "replace").strip() or "another process"
            fh.close()
            raise PerftestError(
                f"{self.folder}: the folder is in use by {holder} (lock file {self.path}). "
                "Wait for that job to finish, or give another output folder.",
                file=self.folder,
            ) from None
        stamp = time.strftime("%Y-%m-%d %H:%M:%S %Z")
        fh.seek(0)
        fh.truncate()
        fh.write(
            f"{self.job} (process {os.getpid()} on host {socket.gethostname()}, "
            f"started {stamp})".encode()
        )
        fh.flush()
        self._fh = fh
        return self

    def release(self) -> None:
        if self._fh is None:
            return
        try:
            self._fh.seek(0)
            self._fh.truncate()
            self._fh.flush()
            _unlock(self._fh)
        finally:
            self._fh.close()
            self._fh = None

    def __enter__(self) -> StoreLock:
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()


def _lock(fh) -> None:
    """Lock an open file without waiting; OSError when another process holds it."""
    try:
        import fcntl
    except ImportError:  # Windows
        import msvcrt

        fh.seek(0)
        msvcrt.locking(fh.fileno(), msvcrt.LK_NBLCK, 1)
        return
    fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)


def _unlock(fh) -> None:
    try:
        import fcntl
    except ImportError:  # Windows
        import msvcrt

        fh.seek(0)
        msvcrt.locking(fh.fileno(), msvcrt.LK_UNLCK, 1)
        return
    fcntl.flock(fh.fileno(), fcntl.LOCK_UN)


def _in_notebook() -> bool:
    """Whether the code runs in a Jupyter kernel (IPython with a kernel app)."""
    ipython = sys.modules.get("IPython")
    if ipython is None:
        return False
    try:
        shell = ipython.get_ipython()
    except AttributeError:
        return False
    return shell is not None and "IPKernelApp" in getattr(shell, "config", {})


#: A job shorter than this shows no bar at all [s]: a bar that appears and is
#: gone within a blink only clutters a notebook cell.
BAR_DELAY = 2.0


def _bar(total: int, notebook: bool, delay: float):
    """A tqdm bar: the notebook widget when ipywidgets is there, else text on stderr."""
    try:
        if notebook:
            import importlib.util

            if importlib.util.find_spec("ipywidgets") is not None:
                from tqdm.auto import tqdm
            else:  # text bar in the cell's stderr output (Jupyter honours "\r")
                from tqdm.std import tqdm
        else:
            from tqdm.std import tqdm
    except ImportError:
        return None
    return tqdm(total=total, unit="window", delay=delay, file=sys.stderr, dynamic_ncols=True)


class Progress:
    """Progress of a job: a tqdm bar in a notebook or terminal, or a line on a stream.

    Parameters
    ----------
    total : int
        Windows in the job.
    enabled : bool or None
        None: shown in a Jupyter notebook (tqdm's notebook bar) or when stderr is a
        terminal; either way only for jobs that last more than :data:`BAR_DELAY`.
    stream : file, optional
        Write plain progress lines to this stream instead of a bar.
    every : float, default 0.5
        Smallest interval between two updates of a line [s].
    """

    def __init__(self, total: int, enabled=None, stream=None, every: float = 0.5):
        self._tqdm = None
        if stream is None and enabled is not False:
            notebook = _in_notebook()
            isatty = getattr(sys.stderr, "isatty", None)
            if enabled or notebook or bool(isatty and isatty()):
                self._tqdm = _bar(int(total), notebook, 0.0 if enabled else BAR_DELAY)
        self.stream = stream if stream is not None else sys.stderr
        if enabled is None:
            isatty = getattr(self.stream, "isatty", None)
            enabled = bool(isatty and isatty())
        self.enabled = bool(enabled)
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.total = int(total)
        self.done = self.reused = self.failed = 0
        self.every = float(every)
        self.t0 = time.perf_counter()
        self._last = -1e9
        self._width = 0

    def add(self, rows: int, failed: int = 0, reused: bool = False) -> None:
        self.done += rows
        self.failed += failed
        if reused:
            self.reused += rows
        if self._tqdm is not None:
            extra = {}
            if self.failed:
                extra["failed"] = self.failed
            if self.reused:
                extra["from earlier run"] = self.reused
            if extra:
                self._tqdm.set_postfix(extra, refresh=False)
            self._tqdm.update(rows)
            return
        now = time.perf_counter()
        if now - self._last >= self.every:
            self._last = now
            self._show(final=False)

    def close(self) -> None:
        if self._tqdm is not None:
            self._tqdm.close()
            return
        self._show(final=True)

    def _show(self, final: bool) -> None:
        if not self.enabled:
            return
        elapsed = time.perf_counter() - self.t0
        fresh = self.done - self.reused
        rate = fresh / elapsed if elapsed > 0 else 0.0
        left = self.total - self.done
        eta = f"{_clock(left / rate)} left" if rate > 0 and left > 0 else ""
        pct = 100.0 * self.done / self.total if self.total else 100.0
        text = (
            f"windows {self.done}/{self.total} ({pct:.0f} %), {rate:.1f}/s"
            + (f", {self.reused} from earlier run" if self.reused else "")
            + (f", {self.failed} failed" if self.failed else "")
            + (f", {eta}" if eta else "")
            + (f", {_clock(elapsed)} elapsed" if final else "")
        )
        if self.tty:
            pad = max(0, self._width - len(text))
            self.stream.write("\r" + text + " " * pad + ("\n" if final else ""))
            self._width = len(text)
        else:
            self.stream.write(text + "\n")
        self.stream.flush()


def _clock(seconds: float) -> str:
    seconds = int(round(seconds))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"
