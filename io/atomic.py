"""Atomic output files: written under a temporary name beside the target, published when complete.

A reader never sees a half-written file, and a failure leaves no file at all:

* the block of :func:`atomic_output` writes a temporary file ``.NAME.PID.tmp`` beside the target;
  any error (a full disk, a file-size limit, a read-only folder) removes it and ends as
  :class:`OutputRefused` naming the target and the reason;
* the finished file is flushed to the disk (``fsync``) and then published: without ``force`` by
  a hard link (``os.link``), which fails when the name exists, so of two runs creating the same
  file exactly one succeeds; with ``force`` by a rename (``os.replace``), so the file is wholly
  one run's. On a file system without hard links the name is claimed by exclusive creation
  (``O_EXCL``) and the file renamed over that empty placeholder: still one winner, but the name
  is an empty file for that moment;
* this process remembers its temporary and published files: when SIGINT or SIGTERM ends the run
  (:mod:`ohmgraph.io.interrupts`), :func:`discard_run_files` removes them all, so an interrupt at
  any stage leaves nothing behind;
* a run that changes an existing file (``--append``: read, extend, publish the new version)
  holds :func:`exclusive` on it, so of two such runs the second reads the first's result and
  both changes land. It is an advisory lock (``flock``) on ``.NAME.lock`` beside the file:
  the kernel releases it when its process ends however it ends, so a killed run never blocks
  the next one; the holder removes the lock file when done (a killed one leaves it behind,
  unlocked and harmless, and the next run removes it).
"""

from __future__ import annotations

import contextlib
import errno
import fcntl
import os
from pathlib import Path

from .errors import InputError, OutputRefused
from .interrupts import checkpoint, deferred


NO_HARD_LINKS = {errno.EPERM, errno.EOPNOTSUPP, errno.ENOTSUP, errno.ENOSYS}


class _RunFiles:
    temporaries: set = set()        # temporary files being written
    published: list = []            # (path, device, inode) of files this run published


def refuse_existing(path, force: bool) -> Path:
    """Raise :class:`OutputRefused` if ``path`` exists and ``force`` is false, or is a folder."""
    path = Path(path)
    try:
        if path.is_dir():
            raise OutputRefused(f"{path}: is a folder, not a file")
        if path.exists() and not force:
            raise OutputRefused(f"{path}: already exists (use --force to overwrite)")
        if not path.parent.exists():
            raise OutputRefused(f"{path}: folder {path.parent} does not exist")
    except OSError as error:                    # for example a name longer than allowed
        raise OutputRefused(f"{path}: cannot be written ({reason(error)})") from None
    return path


def refuse_input(output, inputs) -> None:
    """Raise :class:`InputError` if ``output`` is one of the ``inputs`` (even with ``--force``).

    Writing a result over the file it was computed from would destroy the input.
    """
    output = Path(output)
    try:
        if not output.is_file():
            return
        same = [source for source in inputs
                if source is not None and Path(source).is_file()
                and os.path.samefile(output, source)]
    except OSError:           # an unusable name: reported when the file is read or written
        return
    if same:
        raise InputError(f"{output}: is also the input file {same[0]}; name another output file")


def reason(error: OSError) -> str:
    """The operating system's words for a failed file operation (``No space left on device``)."""
    return error.strerror or str(error)


def _fsync(path: Path) -> None:
    descriptor = os.open(path, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def _claim(temporary: Path, path: Path) -> None:
    """Publish ``temporary`` as ``path`` only if ``path`` does not exist (atomically)."""
    try:
        os.link(temporary, path)
    except FileExistsError:
        raise
    except OSError as error:
        if error.errno not in NO_HARD_LINKS:
            raise
        # A file system without hard links (FAT, some network shares): claim the name by
        # exclusive creation, then rename over the empty placeholder.
        os.close(os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666))
        os.replace(temporary, path)
        return
    os.unlink(temporary)


def _publish(temporary: Path, path: Path, force: bool) -> None:
    """Give the finished temporary file its name; signals wait until the name is recorded."""
    with deferred():
        if force:
            os.replace(temporary, path)
        else:
            try:
                _claim(temporary, path)
            except FileExistsError:
                raise OutputRefused(f"{path}: already exists (another run created it while this "
                                    "one was working; use --force to overwrite)") from None
        _RunFiles.temporaries.discard(temporary)
        status = os.stat(path)
        _RunFiles.published.append((path, status.st_dev, status.st_ino))


@contextlib.contextmanager
def atomic_output(path, force: bool = False):
    """Yield a temporary path beside ``path``; publish it as ``path`` only if the block succeeds.

    Raises
    ------
    OutputRefused
        If ``path`` exists and ``force`` is false (also when another run creates it meanwhile),
        is a folder, its folder does not exist, or the file cannot be written (an ``OSError``
        inside the block, on flushing or on publishing); the message names ``path`` and the
        reason. Nothing is left behind.
    """
    path = refuse_existing(path, force)
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    _RunFiles.temporaries.add(temporary)
    try:
        yield temporary
        _fsync(temporary)
        checkpoint("publish")
        _publish(temporary, path, force)
    except OSError as error:
        raise OutputRefused(f"{path}: cannot be written ({reason(error)})") from None
    finally:
        with deferred():
            _remove(temporary)
            _RunFiles.temporaries.discard(temporary)
    checkpoint("published")


# flock is not available on this file system: the change goes ahead without the lock.
NO_LOCKS = {errno.ENOLCK, errno.EOPNOTSUPP, errno.ENOTSUP, errno.ENOSYS}


def _lock_descriptor(lock: Path) -> int | None:
    """An open descriptor of ``lock`` holding its exclusive lock (None where locks do not work).

    A waiter may get the lock of a file the holder has just removed; it then tries again on the
    current one (the lock counts only while the name still points to the locked file).
    """
    while True:
        descriptor = os.open(lock, os.O_RDWR | os.O_CREAT, 0o666)
        try:
            try:
                fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                checkpoint("locked-out")               # another run holds it: wait for it
                fcntl.flock(descriptor, fcntl.LOCK_EX)
            try:
                current = os.stat(lock).st_ino == os.fstat(descriptor).st_ino
            except FileNotFoundError:
                current = False
        except OSError as error:
            os.close(descriptor)
            if error.errno in NO_LOCKS:
                return None
            raise
        except BaseException:
            os.close(descriptor)
            raise
        if current:
            return descriptor
        os.close(descriptor)


@contextlib.contextmanager
def exclusive(path):
    """Hold the advisory lock of ``path`` for the block (module notes); runs that change the
    same file take turns.

    Raises
    ------
    OutputRefused
        If the lock file cannot be created beside ``path`` (a read-only folder, for example).
    """
    path = Path(path)
    lock = path.with_name(f".{path.name}.lock")
    try:
        descriptor = _lock_descriptor(lock)
    except OSError as error:
        raise OutputRefused(f"{path}: cannot be locked for the change ({reason(error)})") \
            from None
    try:
        yield
    finally:
        if descriptor is not None:
            with deferred():
                _remove(lock)
                os.close(descriptor)


def _remove(path: Path) -> None:
    """Remove a file if it is there (its folder may be missing or be a file: nothing to do)."""
    with contextlib.suppress(FileNotFoundError, NotADirectoryError):
        path.unlink()


def start_run() -> None:
    """Forget the files of any earlier run in this process (the command line calls this)."""
    _RunFiles.temporaries = set()
    _RunFiles.published = []


def discard_run_files() -> None:
    """Remove every temporary file of this run and every file it published (after an interrupt).

    A published file is removed only while it is still the one this run wrote (same device and
    inode), never a file another process has put there since.
    """
    for temporary in list(_RunFiles.temporaries):
        with contextlib.suppress(OSError):
            _remove(temporary)
    for path, device, inode in _RunFiles.published:
        with contextlib.suppress(OSError):
            status = os.stat(path)
            if (status.st_dev, status.st_ino) == (device, inode):
                path.unlink()
    start_run()
