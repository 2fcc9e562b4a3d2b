"""Sets of files written all or nothing: temporaries, a rename journal, the folder lock.

A plan is several files (plan.json, plan.csv, plan.ecsv, curves.npz and a plot) that only make
sense together. :func:`commit_files` writes them so that a crash at any moment, even SIGKILL or
a power cut, leaves the old set or the new one:

1. every file is written to a temporary beside it, flushed and synced;
2. a journal (``.nightbits-set.json`` in the folder, itself written atomically) lists the
   renames still to do, then the folder is synced;
3. the temporaries are renamed into place, SIGINT and SIGTERM held back
   (:func:`deferred_interrupts`);
4. the journal is removed.

Before step 2 a crash leaves only temporaries, removed by the next writer
(:func:`clean_stale`). After it, every rename still to do is a complete file, so
:func:`settle_folder`, run by the next reader or writer, finishes the renames: the journal is
the moment the new set exists. The folder is locked (:class:`OutLock`) while it is written or
settled, so a second writer is refused and no reader settles a set being written.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import signal
import tempfile
from pathlib import Path

from planner.errors import PlanError

__all__ = [
    "JOURNAL_NAME",
    "OutLock",
    "clean_stale",
    "commit_files",
    "deferred_interrupts",
    "digest",
    "settle_folder",
    "write_temporary",
]

#: The rename journal of a set being committed (its presence means: finish the renames).
JOURNAL_NAME = ".nightbits-set.json"


def digest(data: bytes) -> str:
    """SHA-256 hex digest of ``data`` (the manifest's fingerprint of one file)."""
    return hashlib.sha256(data).hexdigest()


def write_temporary(path: Path, data: bytes) -> Path:
    """Write ``data`` to a synced temporary file beside ``path`` and return its path.

    The temporary is named ``.<name>.<random>.tmp`` and gets the umask's mode, like any new file
    (mkstemp alone would make it 0600).
    """
    from inference.posterior import current_umask

    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.fchmod(fd, 0o666 & ~current_umask())
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(name)
        raise
    return Path(name)


def _sync_folder(folder: Path) -> None:
    """Make the renames and unlinks in ``folder`` durable (a no-op where folders cannot sync)."""
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


@contextlib.contextmanager
def deferred_interrupts():
    """Hold SIGINT and SIGTERM back inside the block, then act on them as usual.

    Python runs signal handlers in the main thread between bytecodes, so replacing the
    handlers for the block defers an interrupt whichever thread the kernel delivers it to.
    Outside the main thread (where handlers cannot be set) the block runs unprotected.
    """
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    kinds = [signal.SIGINT, signal.SIGTERM]
    previous = {kind: signal.signal(kind, lambda number, frame: caught.append(number))
                for kind in kinds}
    try:
        yield
    finally:
        for kind, handler in previous.items():
            signal.signal(kind, handler)
    for number in caught[:1]:
        handler = previous[number]
        if callable(handler):
            handler(number, None)
        elif handler == signal.SIG_DFL:
            signal.raise_signal(number)


class OutLock:
    """An exclusive lock on an output folder, held until the process ends or :meth:`release`.

    Two commands writing into one folder (two ``--force`` runs) would otherwise mix their
    files; the second is refused at once with one sentence. The lock is ``flock`` on the
    folder itself, so nothing is written to take it, and the system drops it when the process
    ends, however it ends. A folder that does not exist yet is created to be locked, so the
    second of two runs into one new folder is refused at its start too; :meth:`release` removes
    the folders it created if they are still empty (nothing was written).

    Parameters
    ----------
    folder : str or Path
        The output folder, locked now.

    Raises
    ------
    PlanError
        If another process holds the lock, or the folder cannot be created.
    """

    def __init__(self, folder: str | Path) -> None:
        self.folder, self._fd, self._created = Path(folder), None, []
        missing = []
        probe = self.folder
        while not probe.exists() and probe != probe.parent:
            missing.append(probe)
            probe = probe.parent
        try:
            for path in reversed(missing):
                path.mkdir(exist_ok=True)
                self._created.append(path)
        except OSError as exc:
            self._remove_created()
            raise PlanError(f"--out {self.folder}: the folder cannot be created "
                            f"({exc.strerror or exc}); choose another folder with --out.") from None
        self.acquire()

    def acquire(self) -> None:
        """Take the lock (a no-op if held).

        Raises
        ------
        PlanError
            If another process holds it.
        """
        import fcntl

        if self._fd is not None:
            return
        fd = os.open(self.folder, os.O_RDONLY)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            self._remove_created()
            raise PlanError(f"another nightbits command is writing into {self.folder}; wait "
                            "for it to finish or choose another folder with --out.") from None
        self._fd = fd

    def release(self) -> None:
        """Release the lock; remove the folders made for it if nothing was written there."""
        if self._fd is not None:
            self._remove_created()  # while locked: no other writer has started in them
            os.close(self._fd)
            self._fd = None

    def _remove_created(self) -> None:
        for path in reversed(self._created):
            with contextlib.suppress(OSError):  # not empty: something was written, keep it
                path.rmdir()
        self._created = []


def clean_stale(folder: Path, names) -> None:
    """Remove the temporaries of ``names`` in ``folder`` (call only with its lock held)."""
    for name in names:
        for stale in folder.glob(f".{name}.*.tmp"):
            with contextlib.suppress(OSError):
                stale.unlink()


def _resolve(folder: Path, name: str) -> Path:
    path = Path(name)
    return path if path.is_absolute() else folder / path


def settle_folder(folder: str | Path, lock: OutLock | None = None) -> bool:
    """Finish the commit of a set that a killed writer left half-renamed in ``folder``.

    Parameters
    ----------
    folder : str or Path
        A folder written by :func:`commit_files`.
    lock : OutLock, optional
        The folder's lock if the caller holds it; else it is taken for the settling.

    Returns
    -------
    bool
        True if there was a journal and its renames were finished.

    Raises
    ------
    PlanError
        If another command is writing there, or the renames cannot be finished.
    """
    folder = Path(folder)
    journal = folder / JOURNAL_NAME
    if not journal.exists():
        return False
    own = OutLock(folder) if lock is None else None
    try:
        try:
            renames = json.loads(journal.read_text(encoding="utf-8"))["renames"]
        except FileNotFoundError:
            return False  # settled by the writer that held the lock
        except (OSError, ValueError, KeyError, TypeError):
            renames = None
        if not isinstance(renames, list) or not all(
                isinstance(r, list) and len(r) == 2 and all(isinstance(x, str) for x in r)
                for r in renames):
            raise PlanError(f"{journal} is damaged, so the set of files in {folder} may be "
                            "mixed; delete that folder's plan files and plan again.")
        try:
            for tmp, final in renames:
                tmp_path = _resolve(folder, tmp)
                if tmp_path.exists():
                    os.replace(tmp_path, _resolve(folder, final))
            journal.unlink()
            _sync_folder(folder)
        except OSError as exc:
            raise PlanError(f"the files in {folder} were left half-renamed by an interrupted "
                            f"writer and cannot be completed ({exc.strerror or exc}); make the "
                            "folder writable and run the command again.") from None
        return True
    finally:
        if own is not None:
            own.release()


def commit_files(folder: Path, payload: dict, on_commit=None) -> None:
    """Write ``payload`` (final path to bytes) as one set through ``folder``'s journal.

    Call with the folder's lock held and any earlier journal settled. Files outside
    ``folder`` (a plot) are in the set too: their temporaries sit beside them and the journal
    names them by absolute path.

    Parameters
    ----------
    folder : Path
        The locked output folder; it holds the journal.
    payload : dict of Path to bytes
        Every file of the set.
    on_commit : callable, optional
        Called with no argument once the set exists (the journal is in place), before a
        held-back interrupt is acted on.

    Raises
    ------
    OSError
        If a file cannot be written; before the journal nothing is left behind, after it the
        next :func:`settle_folder` finishes the set.
    """
    journal = folder / JOURNAL_NAME
    temporaries, started = {}, False
    try:
        for final, data in payload.items():
            temporaries[final] = write_temporary(final, data)
        renames = [[_relative(folder, tmp), _relative(folder, final)]
                   for final, tmp in temporaries.items()]
        text = json.dumps({"renames": renames}, indent=1) + "\n"
        journal_tmp = write_temporary(journal, text.encode("utf-8"))
        with deferred_interrupts():
            os.replace(journal_tmp, journal)
            started = True
            _sync_folder(folder)
            if on_commit is not None:
                on_commit()
            for final, tmp in temporaries.items():
                os.replace(tmp, final)
            journal.unlink()
            _sync_folder(folder)
    finally:
        if not started:  # by pattern: an interrupt may come before a name is kept
            clean_stale(folder, [JOURNAL_NAME])
            for final in payload:
                clean_stale(final.parent, [final.name])


def _relative(folder: Path, path: Path) -> str:
    try:
        return str(path.relative_to(folder))
    except ValueError:
        return str(path.resolve())
