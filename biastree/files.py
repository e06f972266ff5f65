"""Writing outputs whole or not at all."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from biastree.errors import BiasTreeError

# A leftover of a run killed with SIGKILL (the only way to skip the cleanup)
# is recognisable by this marker: .NAME.biastree-partial-XXXXXXXX
PARTIAL = ".biastree-partial-"


def write_atomic(path: str | Path, data: str | bytes) -> None:
    """Write ``data`` to ``path`` through a temporary file in the same folder,
    so a reader never sees a half-written file and a failure leaves no trace.

    The temporary file is removed on any failure and on interruption
    (KeyboardInterrupt, or the CLI's SIGTERM exception), then the
    exception goes on.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise BiasTreeError(f"{path}: folder {folder} does not exist")
    if path.is_dir():
        raise BiasTreeError(f"{path}: is a folder, not a file name")
    payload = data.encode("utf-8", "backslashreplace") if isinstance(data, str) else data
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}{PARTIAL}", dir=folder)
    except OSError as exc:
        raise BiasTreeError(f"{path}: cannot write ({exc.strerror})") from None
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; outputs get the usual mode
        os.replace(tmp, path)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise BiasTreeError(f"{path}: cannot write ({exc.strerror})") from None
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
