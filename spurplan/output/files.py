"""Writing output files so that nothing is ever half-written, and only regular files.

Every file spurplan writes is prepared under no name or a hidden temporary one in the
target's folder and then renamed into place (``os.replace`` is atomic on one file
system, POSIX ``rename(2)``), so an interrupted run leaves either the old file or the
new one, never a fragment.

Where the system allows it (Linux, on file systems with ``O_TMPFILE``: ext4, XFS,
Btrfs, tmpfs, ...; open(2) man page) the content is written into an unnamed file
of the target's folder and given a name only at the end (``linkat`` through
``/proc/self/fd``, then ``os.replace``), so that a SIGKILL, a power cut or a crash
while the bytes are written leaves nothing behind; only the sub-millisecond link and
rename have a name, ``.NAME.*.part``.  Elsewhere the content goes to a named
temporary file ``.NAME.*.part`` in the same folder (``tempfile.mkstemp``), removed on
every error Python sees, but left behind by a SIGKILL during the write.

Before anything is written, the target is checked (:func:`check_target`): a new name
or an existing regular file, in an existing folder.  A device node (``/dev/null``), a
named pipe, a socket, a folder, a symbolic link, a name ending in a path separator
or a missing folder is an :class:`OutputError` (one line, exit status 2): such a
target would be replaced by a file, or the file would land under another name.

New files get the usual permissions (``0666`` less the umask), as ``open()`` gives.
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import shutil
import stat
import tempfile
from pathlib import Path

from spurplan.errors import OutputError  # re-exported (lives in errors.py)
from spurplan.fields import file_kind

# Errors of open(O_TMPFILE) that mean "not supported here" (open(2) man page): the
# kernel does not know the flag (EISDIR: it sees O_DIRECTORY with O_WRONLY) or the
# file system does not support it (EOPNOTSUPP); fall back to a named file then.
_NO_TMPFILE = {errno.EISDIR, errno.EOPNOTSUPP, errno.EINVAL, getattr(errno, "ENOTSUP", errno.EOPNOTSUPP)}


def _reason(exc: OSError) -> str:
    return exc.strerror or exc.__class__.__name__


def check_target(path: str | os.PathLike) -> Path:
    """``path`` as a file spurplan may write: a new name or a regular file, in an existing folder.

    A symbolic link is refused as well (replacing it would turn the link into a file;
    writing through it would put the file elsewhere than named).

    Raises
    ------
    OutputError
        One line naming the path, what it is and what was expected.
    """
    raw = os.fspath(path)
    if isinstance(raw, bytes):
        raw = os.fsdecode(raw)
    seps = tuple(s for s in (os.sep, os.altsep) if s)
    if raw == "" or raw.endswith(seps) or os.path.basename(raw) in ("", ".", ".."):
        raise OutputError(f"{raw!r}: names a folder, not a file: expected a file name such as 'out.png'")
    target = Path(raw)
    try:
        st = os.lstat(target)
    except FileNotFoundError:
        st = None
    except NotADirectoryError:
        raise OutputError(
            f"{target}: a part of the path is not a folder: expected an existing writable folder"
        ) from None
    except (OSError, ValueError) as exc:
        reason = _reason(exc) if isinstance(exc, OSError) else str(exc)
        raise OutputError(f"{target}: cannot write ({reason}): expected a usable file name") from None
    if st is not None and not stat.S_ISREG(st.st_mode):
        raise OutputError(
            f"{target}: is {file_kind(st.st_mode)}: expected a regular file or a new file name "
            "(spurplan writes only regular files)"
        )
    folder = target.parent
    try:
        folder_st = os.stat(folder)
    except FileNotFoundError:
        raise OutputError(
            f"{target}: the folder {folder} does not exist: expected an existing writable folder"
        ) from None
    except NotADirectoryError:
        raise OutputError(
            f"{target}: {folder} is not a folder: expected an existing writable folder"
        ) from None
    except OSError as exc:
        raise OutputError(f"{target}: cannot write ({_reason(exc)}): expected a writable folder") from None
    if not stat.S_ISDIR(folder_st.st_mode):
        raise OutputError(f"{target}: {folder} is not a folder: expected an existing writable folder")
    return target


def _hidden_name(folder: Path, label: str, suffix: str = ".part") -> Path:
    """A fresh hidden name ``.LABEL.XXXXXXXXXXXX.part`` in ``folder`` (not created)."""
    for _ in range(100):
        name = folder / f".{label[:80]}.{os.urandom(6).hex()}{suffix}"
        if not os.path.lexists(name):
            return name
    raise OutputError(f"{folder / label}: cannot write (no free temporary name): expected a writable folder")


class _Staged:
    """The content of one file, written but not yet named (or under a hidden name).

    An unnamed file (``O_TMPFILE``) exists only while its descriptor ``fd`` is open
    or once it is linked, so ``fd`` stays open until :meth:`place` or
    :meth:`discard`; the bytes go through a duplicate of it.
    """

    def __init__(self, folder: Path, label: str, payload: bytes):
        self.folder, self.label = folder, label
        self.fd: int | None = None  # an unnamed file's descriptor, kept for the link
        self.tmp: Path | None = None  # the named temporary file (fallback)
        try:
            write_fd = self._open()
            with os.fdopen(write_fd, "wb") as handle:
                handle.write(payload)
        except BaseException:
            self.discard()
            raise

    def _open(self) -> int:
        """Create the file; returns a descriptor to write through (closed by the writer)."""
        flag = getattr(os, "O_TMPFILE", None)
        if flag is not None and _proc_fd_links():
            try:
                self.fd = os.open(self.folder, flag | os.O_WRONLY, 0o666)
            except OSError as exc:
                if exc.errno not in _NO_TMPFILE:
                    raise
            else:
                return os.dup(self.fd)
        fd, tmp = tempfile.mkstemp(dir=self.folder, prefix=f".{self.label[:80]}.", suffix=".part")
        self.tmp = Path(tmp)
        # mkstemp makes the file private (0600); give it the usual permissions.
        os.chmod(self.tmp, 0o666 & ~_umask())
        return fd

    def place(self, name: Path, *, replace: bool = True) -> None:
        """Give the content ``name``.

        With ``replace`` through a hidden name and ``os.replace`` (``name`` may exist);
        without, an unnamed file is linked at ``name`` directly (a name in a new folder).
        """
        try:
            if self.fd is not None:
                link_to = _hidden_name(self.folder, self.label) if replace else name
                _link_unnamed(self.fd, link_to)
                os.close(self.fd)
                self.fd = None
                self.tmp = link_to if replace else None
            if self.tmp is not None:
                os.replace(self.tmp, name)
                self.tmp = None
        except BaseException:
            self.discard()
            raise

    def discard(self) -> None:
        """Forget the content: close the unnamed file, remove a temporary name."""
        if self.fd is not None:
            os.close(self.fd)
            self.fd = None
        if self.tmp is not None:
            self.tmp.unlink(missing_ok=True)
            self.tmp = None


def _link_unnamed(fd: int, name: Path) -> None:
    """Give the unnamed file open as ``fd`` the name ``name`` (open(2), O_TMPFILE).

    ``linkat(proc_fd_dir, "N", AT_FDCWD, name, AT_SYMLINK_FOLLOW)``: Python's
    ``os.link`` calls plain ``link(2)``, which does not follow the ``/proc/self/fd``
    link (EXDEV), unless a directory descriptor is given; giving one makes it
    ``linkat`` with ``AT_SYMLINK_FOLLOW``.
    """
    proc = os.open("/proc/self/fd", os.O_RDONLY | os.O_DIRECTORY)
    try:
        os.link(str(fd), name, src_dir_fd=proc, follow_symlinks=True)
    finally:
        os.close(proc)


_PROC_FD: bool | None = None


def _proc_fd_links() -> bool:
    """Whether an unnamed file can be linked through ``/proc/self/fd`` (procfs mounted)."""
    global _PROC_FD
    if _PROC_FD is None:
        _PROC_FD = os.path.isdir("/proc/self/fd")
    return _PROC_FD


@contextlib.contextmanager
def _reported(target: Path):
    """Turn an ``OSError`` inside into one :class:`OutputError` line naming ``target``."""
    try:
        yield
    except OutputError:
        raise
    except OSError as exc:
        folder = exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS, errno.ENOENT)
        expected = "a writable folder" if folder else "room on a writable disk"
        raise OutputError(f"{target}: cannot write ({_reason(exc)}): expected {expected}") from None


def _stage(folder: Path, label: str, payload: bytes, target: Path) -> _Staged:
    """:class:`_Staged` with OS errors turned into :class:`OutputError` naming ``target``."""
    with _reported(target):
        return _Staged(folder, label, payload)


def write_atomic(path: str | Path, data: bytes | str) -> Path:
    """Write ``data`` to ``path`` (checked by :func:`check_target`) without a partial file ever showing.

    Parameters
    ----------
    path : str or Path
        The file to write: a new name or a regular file, in an existing folder.
    data : bytes or str
        The content; text is written as UTF-8.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    OutputError
        One line naming the path, when it cannot be written.
    """
    target = check_target(path)
    payload = data.encode("utf-8") if isinstance(data, str) else data
    folder = target.parent if str(target.parent) else Path(".")
    staged = _stage(folder, target.name, payload, target)
    with _reported(target):
        staged.place(target)
    return target


def write_with_folder(path: str | Path, text: str, folder_name: str, files: dict[str, bytes], owned) -> Path:
    """Write a document and the folder of files it refers to, as one unit as far as POSIX allows.

    Parameters
    ----------
    path : str or Path
        The document (checked by :func:`check_target`).
    text : str
        Its content (UTF-8).
    folder_name : str
        The folder beside it, e.g. ``"review_files"``.
    files : dict of str -> bytes
        The folder's files by name.
    owned : re.Pattern
        Names of files a previous run wrote there: an existing folder is replaced
        only when it holds nothing else (not a user's file, not a subfolder).

    Order: every file and the document are written unnamed (or hidden) first; then a
    hidden new folder gets the files and is renamed into place (an earlier folder of
    the same name is moved aside first); then the document is renamed into place,
    and only then is the earlier folder deleted.  An error or Ctrl-C at any step
    undoes the steps before it, so the earlier document and folder stay as they
    were; a SIGKILL can leave the hidden new or earlier folder (``.NAME_files.*``)
    only in the microseconds between those renames.  A folder name that is a file,
    a link, a read-only folder or one that holds other files is an
    :class:`OutputError` before anything is written.

    Returns
    -------
    Path
        The document written.
    """
    target = check_target(path)
    parent = target.parent if str(target.parent) else Path(".")
    folder = parent / folder_name
    check_folder(folder, owned)
    staged: list[tuple[str, _Staged]] = []
    tmpdir = aside = doc = None
    folder_placed = done = False
    try:
        with _reported(target):
            for name, payload in files.items():
                staged.append((name, _stage(parent, folder_name, payload, target)))
            doc = _stage(parent, target.name, text.encode("utf-8"), target)
            tmpdir = Path(tempfile.mkdtemp(dir=parent, prefix=f".{folder_name[:80]}.", suffix=".part"))
            os.chmod(tmpdir, 0o777 & ~_umask())
            for name, item in staged:
                item.place(tmpdir / name, replace=False)
            if os.path.lexists(folder):
                aside = _hidden_name(parent, folder_name, ".old")
                os.rename(folder, aside)
            os.rename(tmpdir, folder)
            folder_placed, tmpdir = True, None
            doc.place(target)
            done = True
    finally:
        # Undo whatever was done when the document did not reach its place.
        for _, item in staged:
            item.discard()
        if not done:
            if doc is not None:
                doc.discard()
            if tmpdir is not None:
                shutil.rmtree(tmpdir, ignore_errors=True)
            if folder_placed:
                shutil.rmtree(folder, ignore_errors=True)
            if aside is not None and not os.path.lexists(folder):
                os.rename(aside, folder)
        elif aside is not None:
            shutil.rmtree(aside, ignore_errors=True)
    return target


def check_folder(folder: Path, owned: re.Pattern) -> None:
    """Refuse a folder target that cannot be replaced as a whole (see :func:`write_with_folder`).

    Parameters
    ----------
    folder : Path
        The folder a document's files would go to; a missing one is fine.
    owned : re.Pattern
        Names of the files an earlier run wrote there.

    Raises
    ------
    OutputError
        When it is not a folder, is read-only, cannot be read or holds anything else.
    """
    try:
        st = os.lstat(folder)
    except FileNotFoundError:
        return
    except OSError as exc:
        raise OutputError(f"{folder}: cannot write ({_reason(exc)}): expected a usable folder name") from None
    if not stat.S_ISDIR(st.st_mode):
        raise OutputError(
            f"{folder}: is {file_kind(st.st_mode) if not stat.S_ISREG(st.st_mode) else 'a file'}: expected a "
            "folder for the report's figures, or no such name (move it away or choose another report name)"
        )
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(f"{folder}: is a read-only folder: expected a folder spurplan may replace")
    try:
        entries = list(os.scandir(folder))
    except OSError as exc:
        raise OutputError(
            f"{folder}: cannot read ({_reason(exc)}): expected a folder spurplan may replace"
        ) from None
    foreign = sorted(
        e.name for e in entries if not (owned.fullmatch(e.name) and e.is_file(follow_symlinks=False))
    )
    if foreign:
        raise OutputError(
            f"{folder}: holds {foreign[0]!r}"
            + (f" and {len(foreign) - 1} more" if len(foreign) > 1 else "")
            + ", which an earlier report did not write: expected a folder of the report's own figures "
            "(move it away or choose another report name)"
        )


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def save_figure(fig, path: str | Path, dpi: int = 120) -> Path:
    """Save a matplotlib figure atomically; the format follows the file's suffix.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    path : str or Path
        The file; its suffix chooses the format (PNG without one).
    dpi : int
        Resolution of raster formats (dots per inch).

    Returns
    -------
    Path
        The file written.
    """
    import io

    path = check_target(path)
    fmt = path.suffix.lstrip(".").lower() or "png"
    buf = io.BytesIO()
    try:
        fig.savefig(buf, format=fmt, dpi=dpi)
    except ValueError as exc:
        raise OutputError(f"{path}: {exc}") from None
    return write_atomic(path, buf.getvalue())


def save_touchstone(view, path: str | Path) -> Path:
    """Write a filter view's network as a 2-port Touchstone file, atomically.

    Parameters
    ----------
    view : FilterView
        The filter; :meth:`~spurplan.analyses.filter_view.FilterView.network` gives the
        network on its data grid (or a dense grid for a ladder).
    path : str or Path
        The ``.s2p`` file.

    Returns
    -------
    Path
        The file written (frequencies in MHz).
    """
    from spurplan.output.escaping import terminal

    net = view.network()
    net.frequency.unit = "MHz"
    text = net.write_touchstone(return_string=True, skrf_comment=False)
    # A comment is one line: a name's line breaks or control characters must not end it.
    name = " ".join(terminal(view.stage.name).split())
    header = f"! {name}: written by spurplan (planning estimate, not a measurement)\n"
    return write_atomic(path, header + text)
