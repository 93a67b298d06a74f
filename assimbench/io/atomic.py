"""Write to a temporary name, rename when complete: a stopped writer never leaves a file that looks finished.

Every file the bench writes (result files, spectrum files, report tables and
figures) goes through here. ``os.replace`` is atomic on one file system, so a
reader sees either the old file, no file, or the complete new one.
"""

import contextlib
import os
import tempfile

PARTIAL_SUFFIX = ".partial"


def partial_path(path: str) -> str:
    """The temporary name of ``path`` while it is being written (the suffix keeps the extension
    recognisable: ``result.h5.partial``, ``figure.png.partial``)."""
    return path + PARTIAL_SUFFIX


def prepare(path: str) -> str:
    """The absolute path, with its folder made."""
    path = os.path.abspath(path)
    os.makedirs(os.path.dirname(path), exist_ok=True)
    return path


def unwritable(folder: str):
    """Why files cannot be written in ``folder`` once it and its missing parents are made (one
    line), or None when they can. Asked before a command creates anything, so that a refusal
    leaves nothing behind."""
    path = os.path.abspath(folder)
    existing = path
    while not os.path.lexists(existing):
        existing = os.path.dirname(existing)
    if not os.path.isdir(existing):
        return f"cannot write to {path}: {existing} is not a folder"
    # W for new entries, X to reach them; access() also answers "no" on a read-only file system.
    if not os.access(existing, os.W_OK | os.X_OK) or not _can_create_in(existing):
        if existing == path:
            return f"cannot write to {path} (read-only folder)"
        return f"cannot create {path}: {existing} is a read-only folder"
    return None


def _can_create_in(folder: str) -> bool:
    """Whether a file can really be made in ``folder``: access() says yes to root everywhere, also on
    special file systems (/proc, /sys) that refuse new files; a probe made and removed at once."""
    try:
        handle, probe = tempfile.mkstemp(prefix=".assimbench-probe-", dir=folder)
    except OSError:
        return False
    os.close(handle)
    os.remove(probe)
    return True


def publish(path: str) -> str:
    """Move the complete temporary file of ``path`` to its final name; returns ``path``."""
    os.replace(partial_path(path), path)
    return path


@contextlib.contextmanager
def atomic_file(path: str):
    """Yield the temporary name to write ``path`` under; rename it when the block completes, remove it
    when the block raises (a file that is not meant to be kept incomplete)."""
    path = prepare(path)
    temporary = partial_path(path)
    try:
        yield temporary
    except BaseException:
        with contextlib.suppress(OSError):
            os.remove(temporary)
        raise
    publish(path)


def write_text(path: str, text: str) -> str:
    """Write a text file atomically; returns ``path``."""
    with atomic_file(path) as temporary, open(temporary, "w", encoding="utf-8") as handle:
        handle.write(text)
    return path
