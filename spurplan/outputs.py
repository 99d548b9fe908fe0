"""Writing output files so that nothing is ever half-written.

Every file spurplan writes goes to a temporary name in the same folder and is
renamed into place (``os.replace`` is atomic on one file system), so an
interrupted run leaves either the old file or the new one, never a fragment.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import SpurplanError


class OutputError(SpurplanError, OSError):
    """An output file could not be written."""


def write_atomic(path: str | Path, data: bytes | str) -> Path:
    """Write ``data`` to ``path`` through a temporary file and a rename."""
    path = Path(path)
    payload = data.encode("utf-8") if isinstance(data, str) else data
    folder = path.parent if str(path.parent) else Path(".")
    try:
        fd, tmp = tempfile.mkstemp(dir=folder, prefix=f".{path.name[:80]}.", suffix=".part")
    except (OSError, ValueError) as exc:
        reason = getattr(exc, "strerror", None) or str(exc)
        raise OutputError(f"{path}: cannot write ({reason}): expected a writable folder") from None
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(payload)
        # mkstemp makes the file private (0600); give it the usual permissions.
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise OutputError(
            f"{path}: cannot write ({exc.strerror or exc.__class__.__name__}): expected room on a writable disk"
        ) from None
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def save_figure(fig, path: str | Path, dpi: int = 120) -> Path:
    """Save a matplotlib figure atomically; the format follows the file's suffix."""
    import io

    path = Path(path)
    fmt = path.suffix.lstrip(".").lower() or "png"
    buf = io.BytesIO()
    try:
        fig.savefig(buf, format=fmt, dpi=dpi)
    except ValueError as exc:
        raise OutputError(f"{path}: {exc}") from None
    return write_atomic(path, buf.getvalue())
