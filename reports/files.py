"""Writing report files all-or-nothing, with one-line errors."""

import os
import tempfile
from pathlib import Path


class ReportError(Exception):
    """A report could not be made or written; the message is one line for the user."""


def write_atomically(path, data):
    """Write ``data`` (bytes or str) to ``path`` through a temporary file in the
    same folder and a rename, so a reader never sees half a file and a failure
    leaves any earlier file as it was.  Raises :class:`ReportError`."""
    path = Path(path)
    if isinstance(data, str):
        data = data.encode("utf-8")
    folder = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise ReportError(f"cannot write {path}: it is a folder")
    if not folder.is_dir():
        raise ReportError(f"cannot write {path}: the folder {folder} does not exist")
    try:
        fd, tmp = tempfile.mkstemp(dir=folder, prefix=f".{path.name}.", suffix=".part")
    except OSError as exc:
        raise ReportError(f"cannot write {path}: {exc.strerror or exc}") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.replace(tmp, path)
    except OSError as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise ReportError(f"cannot write {path}: {exc.strerror or exc}") from None
    try:  # the temporary file's 0600 would hide the report from the group
        os.chmod(path, 0o644)
    except OSError:
        pass
    return path
