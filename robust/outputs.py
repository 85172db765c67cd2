"""Where results go: the one module that decides, checks and commits every output path.

Rules (the same for every command):

* A folder target (a dossier) is replaced only when it holds the marker file
  :data:`FOLDER_MARKER`, i.e. when this tool wrote it.  Any other existing
  folder, a file where a folder is meant, a symbolic link, ``.``/``..`` or a
  folder that holds one of the command's input files is refused before any
  computation starts.
* A file target (a gain file) is replaced only when it is a gain file; a folder
  where a file is meant is refused.
* Writability is tested (a probe file created and removed) before the work.
* Folders are written into a staging folder beside the target and swapped into
  place at the end.  On Linux the swap is one ``renameat2(RENAME_EXCHANGE)``
  call, so a kill at any moment leaves either the old or the new folder,
  complete, at the target name; elsewhere two renames are used and the next
  run restores the old folder if a kill fell between them.  Leftover staging
  folders carrying the marker are removed by the next run on the same target.
* A lock (``fcntl.flock`` on a lock file beside the target) makes a second
  concurrent run on the same target fail at once.
* Files and folders get the permissions the user's umask allows.
* Names become file names only through :func:`file_stems`, which cannot map
  two names to one file name.

Everything here raises :class:`OutputError` (a ``ValueError``; exit code 2 at
the command line) with the path and what was expected.
"""

from __future__ import annotations

import contextlib
import ctypes
import ctypes.util
import errno
import hashlib
import os
import re
import shutil
import tempfile
import tomllib
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

FOLDER_MARKER = ".robust-dossier"
_STAGE = ".robust-new-"
_OLD = ".robust-old-"
_LOCK = ".robust-lock"
_SAFE = re.compile(r"[^A-Za-z0-9_-]")


class OutputError(ValueError):
    """An output path that cannot be used; the message names the path and what was expected."""


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _chmod_default(path: Path, *, folder: bool) -> None:
    """Give ``path`` the mode a plain ``open``/``mkdir`` would (mkstemp/mkdtemp make them private)."""
    os.chmod(path, (0o777 if folder else 0o666) & ~_umask())


def _first_existing(path: Path) -> Path:
    p = path
    while not p.exists():
        if p.parent == p:
            break
        p = p.parent
    return p


def _probe_writable(folder: Path, what: str) -> None:
    """Create and remove a probe file in ``folder`` (``os.access`` is wrong for root and read-only mounts)."""
    try:
        fd, probe = tempfile.mkstemp(prefix=".robust-probe-", dir=folder)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise OutputError(f"{what}: cannot write in folder '{folder}': {exc.strerror or exc}") from None


def _check_parent(target: Path, what: str) -> None:
    base = _first_existing(target.parent)
    if not base.is_dir():
        raise OutputError(f"{what} '{target}': '{base}' is a file, not a folder")
    _probe_writable(base, f"{what} '{target}'")


def _inside(child: Path, parent: Path) -> bool:
    try:
        child.relative_to(parent)
        return True
    except ValueError:
        return False


# ---------------------------------------------------------------------------
# file names from user-given names


def file_stems(names: Iterable[str]) -> dict[str, str]:
    """A file-name stem for every name, never two names on one stem.

    A name made only of letters, digits, ``-`` and ``_`` keeps its spelling;
    any other name is spelled safely and gets a short hash of the original, so
    ``placed/x`` and ``placed.x`` map to different files.
    """
    out: dict[str, str] = {}
    used: set[str] = set()
    for name in dict.fromkeys(names):
        stem = _SAFE.sub("_", name)[:60] or "unnamed"
        if stem != name or stem.lower() in used:
            stem = f"{stem}-{hashlib.sha256(name.encode('utf-8')).hexdigest()[:8]}"
        out[name] = stem
        used.add(stem.lower())
    return out


def check_name(name: str, key: str) -> str:
    """A name that may become a file name: letters, digits, ``-`` and ``_``, 1 to 60 characters."""
    if not isinstance(name, str) or not name or len(name) > 60 or _SAFE.search(name):
        raise OutputError(f"'{key}': expected 1 to 60 letters, digits, '-' or '_', got {name!r}")
    return name


# ---------------------------------------------------------------------------
# single files


@dataclass(frozen=True)
class FileTarget:
    """A checked file target."""

    path: Path
    replaces: bool


def _is_gain_file(path: Path) -> bool:
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return False
    return isinstance(doc.get("gain"), dict)


def plan_gain_file(path: str | Path, *, protect: Sequence[str | Path] = ()) -> FileTarget:
    """Check a gain-file target before any work: refuse folders, non-gain files and unwritable places."""
    p = Path(path)
    what = "gain file"
    if p.name in ("", ".", ".."):
        raise OutputError(f"{what} '{path}': expected a file name ending in .toml")
    if p.is_dir():
        raise OutputError(f"{what} '{p}': is a folder; name a file (for example {p / 'gain.toml'})")
    if p.is_symlink():
        raise OutputError(f"{what} '{p}': is a symbolic link; name a plain file")
    absolute = p.resolve()
    for q in protect:
        if Path(q).resolve() == absolute:
            raise OutputError(f"{what} '{p}': is one of this command's input files; name another file")
    replaces = p.exists()
    if replaces and not _is_gain_file(p):
        raise OutputError(
            f"{what} '{p}': exists and is not a gain file (no [gain] table); refusing to replace it. "
            "Name a new file or remove it yourself"
        )
    _check_parent(p, what)
    return FileTarget(p, replaces)


def atomic_write_text(path: str | Path, text: str) -> None:
    """Write ``text`` via a temporary file and one rename (never half-written; mode per umask)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        _chmod_default(Path(tmp), folder=False)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


# ---------------------------------------------------------------------------
# folders (dossiers)


@dataclass(frozen=True)
class FolderTarget:
    """A checked folder target."""

    path: Path
    replaces: bool


def _leftovers(target: Path, tag: str) -> list[Path]:
    parent = target.parent
    if not parent.is_dir():
        return []
    prefix = f".{target.name}{tag}"
    return sorted(p for p in parent.iterdir() if p.name.startswith(prefix) and (p / FOLDER_MARKER).is_file())


def recover(target: str | Path) -> list[str]:
    """Clean up after a run on ``target`` that was killed; returns what was done (for the log).

    A missing target with an old copy beside it (a kill between the two
    renames) gets the old copy back; staging folders this tool made are removed.
    """
    target = Path(target)
    done = []
    olds = _leftovers(target, _OLD)
    if not target.exists() and not target.is_symlink() and olds:
        os.rename(olds[-1], target)
        done.append(f"restored '{target}' from an interrupted run")
        olds = olds[:-1]
    for p in olds + _leftovers(target, _STAGE):
        shutil.rmtree(p, ignore_errors=True)
        done.append(f"removed leftover '{p.name}'")
    return done


def plan_folder(path: str | Path, *, protect: Sequence[str | Path] = ()) -> FolderTarget:
    """Check a folder target before any work (see the module notes for the rules)."""
    p = Path(path)
    what = "output folder"
    if p.name in ("", ".", "..") or str(path).rstrip("/") in ("", ".", ".."):
        raise OutputError(f"{what} '{path}': name a folder of its own (not '.', '..' or the root)")
    if p.is_symlink():
        raise OutputError(f"{what} '{p}': is a symbolic link; name a real folder")
    if p.exists():
        if not p.is_dir():
            raise OutputError(f"{what} '{p}': is a file, not a folder; name a new folder")
        if not (p / FOLDER_MARKER).is_file():
            raise OutputError(
                f"{what} '{p}': exists and was not written by this tool (it has no {FOLDER_MARKER} marker); "
                "refusing to replace it. Name a new folder or remove this one yourself"
            )
    absolute = p.resolve()
    for q in protect:
        if _inside(Path(q).resolve(), absolute):
            raise OutputError(f"{what} '{p}': holds this command's input file '{q}'; name another folder")
    _check_parent(p, what)
    return FolderTarget(p, p.exists())


def _lib_renameat2():
    name = ctypes.util.find_library("c")
    if not name:
        return None
    try:
        fn = ctypes.CDLL(name, use_errno=True).renameat2
    except (OSError, AttributeError):
        return None
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    fn.restype = ctypes.c_int
    return fn


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths in one system call; False where the system cannot."""
    fn = _lib_renameat2()
    if fn is None:
        return False
    at_fdcwd, rename_exchange = -100, 2
    if fn(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP):
        return False
    raise OSError(err, os.strerror(err), str(b))


@contextlib.contextmanager
def _lock(target: Path) -> Iterator[None]:
    import fcntl

    lock_path = target.with_name(f".{target.name}{_LOCK}")
    while True:
        fd = os.open(lock_path, os.O_RDWR | os.O_CREAT, 0o666 & ~_umask())
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            raise OutputError(
                f"output folder '{target}': another run is writing it now; wait for it to finish"
            ) from None
        try:
            same = os.fstat(fd).st_ino == os.stat(lock_path).st_ino
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)  # the lock file was replaced while we took it: take the new one
    try:
        yield
    finally:
        with contextlib.suppress(OSError):
            os.unlink(lock_path)
        os.close(fd)


@contextlib.contextmanager
def staged_folder(target: FolderTarget) -> Iterator[Path]:
    """A staging folder to fill; on normal exit it replaces ``target.path`` crash-safely.

    On any exception (including Ctrl-C) the staging folder is removed and the
    target is left as it was.
    """
    dest = target.path
    dest.parent.mkdir(parents=True, exist_ok=True)
    with _lock(dest):
        recover(dest)
        if dest.exists() and not (dest / FOLDER_MARKER).is_file():
            raise OutputError(f"output folder '{dest}': appeared while this run was working; not replacing it")
        tmp = Path(tempfile.mkdtemp(prefix=f".{dest.name}{_STAGE}", dir=dest.parent))
        try:
            _chmod_default(tmp, folder=True)
            (tmp / FOLDER_MARKER).write_text("written by robust; this folder may be replaced by its next run\n")
            yield tmp
            if dest.exists():
                if _exchange(tmp, dest):
                    shutil.rmtree(tmp, ignore_errors=True)
                else:
                    old = Path(tempfile.mkdtemp(prefix=f".{dest.name}{_OLD}", dir=dest.parent))
                    os.rmdir(old)
                    os.rename(dest, old)
                    os.rename(tmp, dest)
                    shutil.rmtree(old, ignore_errors=True)
            else:
                os.rename(tmp, dest)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
