"""An output directory that appears complete or not at all.

A run writes every output file into a staging directory next to the target and swaps it into
place only after the last file is closed and flushed. A crash, an exception or a full disk
therefore never leaves a half-written output directory under the final name, and the outputs
of an earlier run stay untouched until the new ones are complete.

Staging lives in the target's parent directory so the final step is a rename within one file
system (atomic on POSIX). Names carry the writer's process id, so a later run can tell the
leftovers of a dead run from the staging of a run still in progress.
"""

from __future__ import annotations

import errno
import os
import re
import secrets
import shutil
from pathlib import Path
from types import TracebackType
from typing import Literal

from lakeloss.errors import OutputError

_PARTIAL = "lakeloss-partial"
_OLD = "lakeloss-old"
_DISK_FULL_ERRNOS = frozenset({errno.ENOSPC, errno.EDQUOT})
_NEARLY_FULL = 1 << 20  # [bytes] free space below which a failed write counts as disk full


class OutputDirectory:
    """Context manager that stages outputs and moves them into place on success.

    Parameters
    ----------
    target : str or Path
        Final output directory.
    overwrite : bool
        Replace an existing output directory; without it an existing one is refused.

    Examples
    --------
    >>> with OutputDirectory("results", overwrite=False) as staging:  # doctest: +SKIP
    ...     (staging / "run.json").write_text("{}")
    """

    def __init__(self, target: str | Path, *, overwrite: bool) -> None:
        self.target = Path(os.path.abspath(target))
        self.overwrite = overwrite
        self.staging: Path | None = None

    def check(self) -> None:
        """Refuse an unusable target before any work is done.

        Raises
        ------
        OutputError
            If the target is a file, exists without ``overwrite``, or its parent is not a
            writable directory.
        """
        target = self.target
        if target.exists() and not target.is_dir():
            raise OutputError(
                f"output path {target} is a file, expected a directory; "
                "choose another output.dir or remove the file"
            )
        if target.is_dir() and not self.overwrite:
            raise OutputError(f"output directory {target} exists; pass --overwrite to replace it")
        ancestor = _nearest_existing(target.parent)
        if not ancestor.is_dir():
            raise OutputError(
                f"cannot create output directory {target}: {ancestor} is not a directory; "
                "choose another output.dir"
            )
        if not os.access(ancestor, os.W_OK | os.X_OK):
            raise OutputError(
                f"cannot create output directory {target}: {ancestor} is not writable; "
                "choose another output.dir or fix its permissions"
            )

    def __enter__(self) -> Path:
        self.check()
        parent = self.target.parent
        try:
            parent.mkdir(parents=True, exist_ok=True)
            clean_stale(self.target)
            self.check()  # a restored earlier output may now exist under the final name
            prefix = f".{self.target.name}.{_PARTIAL}-{os.getpid()}-"
            self.staging = _make_staging(parent, prefix)
        except OSError as exc:
            if isinstance(exc, OutputError):
                raise
            raise _as_output_error(exc, self.target) from exc
        return self.staging

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        traceback: TracebackType | None,
    ) -> Literal[False]:
        staging = self.staging
        if staging is None:
            return False
        self.staging = None
        if exc is not None:
            disk_full = _is_disk_full(exc, staging)
            shutil.rmtree(staging, ignore_errors=True)
            if disk_full and not str(exc).startswith("disk full"):
                raise OutputError(
                    f"disk full while writing outputs for {self.target} ({exc}); "
                    "earlier outputs were left untouched; free some space or choose another "
                    "output.dir"
                ) from exc
            return False
        try:
            _sync_tree(staging)
            self._swap_into_place(staging)
        except BaseException as failure:
            shutil.rmtree(staging, ignore_errors=True)
            if isinstance(failure, OSError) and not isinstance(failure, OutputError):
                raise _as_output_error(failure, self.target) from failure
            raise
        return False

    def _swap_into_place(self, staging: Path) -> None:
        """Rename the finished staging directory to the target, keeping the old one aside."""
        target = self.target
        if target.exists() and not self.overwrite:
            # Someone created it while this run was writing: never clobber it silently.
            raise OutputError(f"output directory {target} exists; pass --overwrite to replace it")
        old = None
        if target.exists():
            old = target.parent / f".{target.name}.{_OLD}-{os.getpid()}"
            if old.exists() or old.is_symlink():
                _remove(old)
            os.rename(target, old)
        try:
            os.rename(staging, target)
        except BaseException:
            if old is not None:
                os.rename(old, target)
            raise
        _fsync_directory(target.parent)
        if old is not None:
            _remove(old)


def _make_staging(parent: Path, prefix: str) -> Path:
    """A new, uniquely named directory in ``parent`` with the mode the umask gives.

    Not ``tempfile.mkdtemp``: its 0700 would survive the swap and hide the results from
    everyone else, while outputs are meant to be shared like any directory the user makes.
    """
    while True:
        staging = parent / f"{prefix}{secrets.token_hex(6)}"
        try:
            staging.mkdir(mode=0o777)
        except FileExistsError:
            continue
        return staging


def clean_stale(target: str | Path) -> list[Path]:
    """Remove what dead runs left beside ``target``; restore an output lost mid-swap.

    A dead run's staging directory is deleted. A dead run's set-aside previous output
    (``.<name>.lakeloss-old-<pid>``) is renamed back to ``target`` when the target is missing
    (the run died between its two renames), and deleted otherwise.

    Parameters
    ----------
    target : str or Path
        Final output directory whose neighbours are inspected.

    Returns
    -------
    list of Path
        The leftovers that were removed or restored, in name order.
    """
    target = Path(os.path.abspath(target))
    pattern = re.compile(
        rf"^\.{re.escape(target.name)}\.(?P<kind>{_PARTIAL}|{_OLD})-(?P<pid>\d+)(?:-.*)?$"
    )
    handled: list[Path] = []
    if not target.parent.is_dir():
        return handled
    for entry in sorted(target.parent.iterdir()):
        match = pattern.match(entry.name)
        if match is None or _pid_alive(int(match["pid"])):
            continue
        if match["kind"] == _OLD and not target.exists():
            os.rename(entry, target)
        else:
            shutil.rmtree(entry, ignore_errors=True)
        handled.append(entry)
    return handled


def _remove(path: Path) -> None:
    """Delete a set-aside output: a symlinked output loses only the link, not its target."""
    if path.is_symlink():
        path.unlink()
    else:
        shutil.rmtree(path, ignore_errors=True)


def _nearest_existing(path: Path) -> Path:
    """The path itself or its closest ancestor that exists (as file or directory)."""
    while not path.exists() and path != path.parent:
        path = path.parent
    return path


def _pid_alive(pid: int) -> bool:
    """Whether a process with this id exists (our own pid counts as alive)."""
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, owned by someone else
        return True
    return True


def _is_disk_full(exc: BaseException, staging: Path) -> bool:
    """Whether a failure was caused by a full disk or an exhausted quota.

    Libraries such as netCDF4 or GDAL report a full disk in their own exception types and
    words (GDAL may even say "no such table" after SQLite failed to grow the file), so besides
    the errno anywhere in the exception chain, a failure on a file system with less than
    ``_NEARLY_FULL`` bytes left also counts. The margin is needed because a library removes
    its journal or partial file after failing, which frees a little space again.
    """
    seen: set[int] = set()
    current: BaseException | None = exc
    while current is not None and id(current) not in seen:
        seen.add(id(current))
        if isinstance(current, OSError) and current.errno in _DISK_FULL_ERRNOS:
            return True
        current = current.__cause__ or current.__context__
    try:
        usage = os.statvfs(staging)
    except OSError:
        return False
    return usage.f_bavail * usage.f_frsize < _NEARLY_FULL


def _as_output_error(exc: OSError, target: Path) -> OutputError:
    """Turn an operating-system failure while preparing or swapping into an OutputError."""
    if exc.errno in _DISK_FULL_ERRNOS:
        return OutputError(
            f"disk full while writing outputs for {target} ({exc}); earlier outputs were left "
            "untouched; free some space or choose another output.dir"
        )
    return OutputError(
        f"cannot write output directory {target}: {exc}; check the path and its permissions"
    )


def _sync_tree(root: Path) -> None:
    """Flush every file and directory under ``root`` to disk before it becomes visible."""
    for directory, _, files in os.walk(root):
        for name in files:
            fd = os.open(os.path.join(directory, name), os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
        _fsync_directory(Path(directory))


def _fsync_directory(directory: Path) -> None:
    """Flush a directory's entries (the renames) to disk."""
    fd = os.open(directory, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
