"""Writing outputs safely: whole folders swapped into place, never through a link.

A command that writes an output folder builds it in a temporary sibling folder
(``.NAME.seqmine-tmp-XXXX`` beside ``NAME``) and, when every file is written, swaps it
into place in one step (``renameat2(RENAME_EXCHANGE)`` where the system has it, else
two renames that the next run repairs if it was cut between them). Until the swap the
previous complete folder stays as it was. Every file and folder is flushed to the disk
(``fsync``) before the swap and the parent folder after it, so a power cut leaves
either the previous folder or the new one whole. A run that fails or is interrupted removes
its temporary folder (one killed with SIGKILL leaves it, and the next run into the same
folder removes it). A lock file beside the folder (``.NAME.seqmine-lock``, held with
``flock``) refuses a second run into the same folder while the first is writing.

Every file is created afresh (:func:`open_new`): an existing file is unlinked first, a
symbolic link is refused, so nothing is ever written through a link (or through a hard
link into the previous run). Operating-system errors while writing (no permission, a
full disk, a path below a file) become :class:`~seqmine.errors.OutputError` with one
line naming the path.
"""

from __future__ import annotations

import contextlib
import errno
import glob
import os
import shutil
import signal
import tempfile
import threading
from pathlib import Path

from ..errors import OutputError

__all__ = ["open_new", "check_output_folder", "check_output_file", "writing_folder",
           "writing_file", "writing_files", "output_error", "Staging", "OUTPUT_NAMES",
           "same_file"]

#: Names seqmine writes into an output folder (any command); a folder holding only
#: these (or nothing) may be replaced by a new run.
OUTPUT_NAMES = frozenset({
    "summary.json", "rejects.csv", "patterns.csv", "transitions.csv", "pairwise.csv",
    "early_prediction.csv", "early_prediction_long.csv", "validation_predictions.csv",
    "validation_folds.json", "detectors.json", "examples.json", "report.html",
    "sequences", "patternset", "patterns", "phases",
})

#: Marker files of the sub-folders seqmine writes as one unit, and the suffixes of
#: the files such a folder may hold.
_UNIT_MARKERS = {
    "phases.json": (".json", ".csv", ".graphml", "state_sequences"),
    "patternset.json": (".json", ".csv", ".npz"),
    "sequences.json": (".json", ".npz"),
}

_TMP = ".seqmine-tmp-"
_OLD = ".seqmine-old-"
_LOCK = ".seqmine-lock"


# ---------------------------------------------------------------------- files
def open_new(path, mode="w", *, encoding="utf-8", newline=None):
    """Open ``path`` for writing as a new file (an existing file is unlinked first).

    A symbolic link at ``path`` is refused (:class:`OutputError`), and a hard link
    shared with another folder is never written through.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "a.txt"
    >>> with open_new(p) as fh:
    ...     _ = fh.write("one")
    >>> p.read_text()
    'one'
    """
    path = Path(path)
    if path.is_symlink():
        raise OutputError(f"{path} is a symbolic link; seqmine never writes through links: "
                          f"remove the link or choose another output path.")
    with contextlib.suppress(FileNotFoundError):
        if path.is_dir():
            raise OutputError(f"{path} is a folder; give a file name.")
        os.unlink(path)
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0)
    fd = os.open(path, flags, 0o666)
    try:
        if "b" in mode:
            return os.fdopen(fd, mode)
        return os.fdopen(fd, mode, encoding=encoding, newline=newline)
    except BaseException:
        os.close(fd)
        raise


def same_file(a, b):
    """True when the paths ``a`` and ``b`` name the same existing file."""
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


# --------------------------------------------------------------- path checks
def check_output_folder(target, option="--out"):
    """``target`` as an absolute Path after the checks every output folder gets.

    Refused with a one-line :class:`OutputError`: an empty path, a symbolic link, an
    existing file, a path below a file, the file-system root.
    """
    if target is None or not str(target).strip():
        raise OutputError(f"{option} is empty; give the folder to write, e.g. {option} results.")
    p = Path(target)
    if p.is_symlink():
        raise OutputError(f"{option} {p} is a symbolic link; seqmine never writes through "
                          f"links: give the real folder or remove the link.")
    if p.exists() and not p.is_dir():
        raise OutputError(f"{option} {p} is a file, not a folder; give a folder name.")
    _check_ancestors(p, option)
    full = Path(os.path.abspath(p))
    if full.parent == full or full.name in ("", ".", ".."):
        raise OutputError(f"{option} {p} names the file-system root; give a folder below it.")
    return full


def check_output_file(target, option="--out", *, inputs=()):
    """``target`` as an absolute Path after the checks every output file gets.

    Refused: an empty path, a symbolic link, a folder, a path below a file, and a file
    that is one of ``inputs`` (the command would overwrite what it reads).
    """
    if target is None or not str(target).strip():
        raise OutputError(f"{option} is empty; give the file to write.")
    p = Path(target)
    if p.is_symlink():
        raise OutputError(f"{option} {p} is a symbolic link; seqmine never writes through "
                          f"links: give the real path or remove the link.")
    if p.is_dir():
        raise OutputError(f"{option} {p} is a folder; give a file name such as "
                          f"{p / 'out.csv'}.")
    _check_ancestors(p, option)
    for inp in inputs:
        if inp is not None and str(inp) != "-" and same_file(p, inp):
            raise OutputError(f"{option} {p} is the input {inp}; writing it would replace "
                              f"what the command reads: choose another output path.")
    return Path(os.path.abspath(p))


def _check_ancestors(p, option):
    for anc in Path(os.path.abspath(p)).parents:
        if anc.exists() or anc.is_symlink():
            if not anc.is_dir():
                raise OutputError(f"{option} {p}: {anc} is a file, so nothing can be written "
                                  f"below it; choose another path.")
            return


def _inside(path, folder):
    try:
        Path(os.path.realpath(path)).relative_to(os.path.realpath(folder))
        return True
    except ValueError:
        return False


# --------------------------------------------------------------- single files
@contextlib.contextmanager
def writing_file(target, option="--out", *, inputs=()):
    """Write one output file as a whole: yields a temporary path beside ``target``
    that is renamed onto ``target`` when the block ends without error.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> with writing_file(p) as tmp:
    ...     _ = tmp.write_text("x\\n")
    >>> p.read_text(), sorted(x.name for x in p.parent.iterdir())
    ('x\\n', ['t.csv'])
    """
    path = check_output_file(target, option, inputs=inputs)
    with output_error(path.parent):
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}{_TMP}", dir=path.parent)
        os.close(fd)
        os.unlink(tmp)
    tmp = Path(tmp)
    try:
        with output_error(path, rename=(tmp, path)):
            yield tmp
            with _signals_held():
                if path.is_symlink():
                    raise OutputError(f"{option} {path} became a symbolic link while the "
                                      f"command ran; nothing was written.")
                _sync(tmp)
                os.replace(tmp, path)
                _sync(path.parent)
    finally:
        with contextlib.suppress(OSError):
            os.unlink(tmp)


@contextlib.contextmanager
def writing_files(folder, names, option="--out", *, inputs=()):
    """Write several files into ``folder`` (which may hold other files): yields a private
    temporary folder; when the block ends without error each of ``names`` written there
    is moved onto ``folder / name`` (each file whole; checked like
    :func:`writing_file`)."""
    targets = [check_output_file(Path(folder) / n, option, inputs=inputs) for n in names]
    with output_error(folder):
        Path(folder).mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{targets[0].name}{_TMP}", dir=folder))
    try:
        with output_error(folder, staged=tmp):
            yield tmp
            with _signals_held():
                for target in targets:
                    if (tmp / target.name).exists():
                        _sync(tmp / target.name)
                        os.replace(tmp / target.name, target)
                _sync(Path(folder))
    finally:
        with _signals_held():
            shutil.rmtree(tmp, ignore_errors=True)


# ------------------------------------------------------------------- folders
class Staging:
    """A folder being written: ``path`` is the temporary folder, ``target`` the final one.

    Attributes
    ----------
    target : pathlib.Path
        Where the folder ends up.
    path : pathlib.Path
        The temporary sibling folder every file is written into.
    previous : pathlib.Path or None
        The existing folder at ``target`` (cloned into ``path`` in update mode).
    cloned : set of (int, int)
        (device, inode) of the files cloned from the previous folder (update mode).
    """

    def __init__(self, target, path, previous, cloned):
        self.target = target
        self.path = path
        self.previous = previous
        self.cloned = cloned

    def shown(self, path):
        """``path`` inside the temporary folder as it will be called after the swap."""
        return _shown(path, self.path, self.target)


@contextlib.contextmanager
def writing_folder(target, option="--out", *, inputs=(), update=False, owned=()):
    """Write the folder ``target`` as one step (see the module notes).

    Parameters
    ----------
    target : str or path-like
    option : str
        The option naming the folder, for messages.
    inputs : iterable of path-like
        Files the command reads from outside the folder; refused when one lies inside
        ``target`` (the swap would remove it).
    update : bool
        Start from a clone of the existing folder (hard links; copies where links are
        not possible) instead of an empty folder: a stage re-run in an output folder.
    owned : iterable of str
        Further top-level names that the existing folder may hold and the new run
        replaces (from the folder's record).

    Yields
    ------
    Staging
    """
    full = check_output_folder(target, option)
    parent = full.parent
    with output_error(parent):
        parent.mkdir(parents=True, exist_ok=True)
    if not os.access(parent, os.W_OK | os.X_OK):
        raise OutputError(f"{parent}: no permission to write there (seqmine writes a run "
                          f"beside {full.name} and swaps it in); check the permissions or "
                          f"choose another {option}.")
    for inp in inputs:
        if inp is not None and str(inp) != "-" and Path(inp).exists() and _inside(inp, full):
            raise OutputError(f"{option} {full} holds the input {inp}; the folder is replaced "
                              f"as a whole, so write the results to another folder.")
    with _locked(full, option):
        _recover(full)
        previous = None
        if full.exists():
            _check_replaceable(full, option, owned, update)
            previous = full
        tmp = Path(tempfile.mkdtemp(prefix=f".{full.name}{_TMP}", dir=parent))
        try:
            with output_error(full, staged=tmp):
                cloned = _clone(previous, tmp, option) if (update and previous) else set()
                yield Staging(full, tmp, previous, cloned)
                with _signals_held():
                    _swap(tmp, full)
        finally:
            with _signals_held():
                shutil.rmtree(tmp, ignore_errors=True)


def _check_replaceable(folder, option, owned, update):
    entries = list(os.scandir(folder))
    links = [e.name for e in entries if e.is_symlink()]
    if links:
        raise OutputError(f"{folder / links[0]} is a symbolic link; seqmine never writes "
                          f"through links: remove it or choose another {option}.")
    if update or not entries:
        return
    names = {e.name for e in entries}
    allowed = set(OUTPUT_NAMES) | set(owned)
    for marker, suffixes in _UNIT_MARKERS.items():
        if marker in names:
            allowed |= {n for n in names if n.endswith(suffixes)}
    foreign = sorted(n for n in names - allowed if not n.startswith(".seqmine"))
    if foreign:
        shown = ", ".join(foreign[:3]) + (", ..." if len(foreign) > 3 else "")
        raise OutputError(f"{option} {folder} holds files seqmine did not write ({shown}); "
                          f"a run replaces its folder as a whole, so choose a new or empty "
                          f"folder.")


def _clone(src, dst, option):
    """Copy the tree ``src`` into ``dst`` as hard links; returns the cloned (dev, ino)."""
    cloned = set()
    for root, dirs, files in os.walk(src):
        rel = Path(root).relative_to(src)
        for name in dirs + files:
            p = Path(root) / name
            if p.is_symlink():
                raise OutputError(f"{p} is a symbolic link; seqmine never writes through "
                                  f"links: remove it or choose another {option}.")
        for name in dirs:
            (dst / rel / name).mkdir()
        for name in files:
            s, d = Path(root) / name, dst / rel / name
            try:
                os.link(s, d)
            except OSError:
                shutil.copy2(s, d)
            st = os.stat(d)
            cloned.add((st.st_dev, st.st_ino))
    return cloned


# -------------------------------------------------------------------- the swap
def _sync(path):
    """Flush one file or folder to the disk (no-op where the file system cannot)."""
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _sync_tree(folder):
    """Flush every file and folder under ``folder``, so that the swap that follows never
    exposes a folder whose files a power cut would leave empty."""
    for root, dirs, files in os.walk(folder):
        for name in files:
            p = os.path.join(root, name)
            if not os.path.islink(p):
                _sync(p)
        _sync(root)


def _swap(tmp, target):
    os.chmod(tmp, 0o777 & ~_umask())
    _sync_tree(tmp)
    try:
        _swap_names(tmp, target)
    finally:
        _sync(target.parent)  # the renames themselves


def _swap_names(tmp, target):
    if not target.exists():
        os.rename(tmp, target)
        return
    try:
        _exchange(tmp, target)
    except OSError:
        old = Path(tempfile.mkdtemp(prefix=f".{target.name}{_OLD}", dir=target.parent))
        os.rmdir(old)
        os.rename(target, old)  # cut here: _recover() puts it back
        os.rename(tmp, target)
        shutil.rmtree(old, ignore_errors=True)
        return
    shutil.rmtree(tmp, ignore_errors=True)  # now holds the previous folder


def _exchange(a, b):
    """Swap the names ``a`` and ``b`` atomically (Linux renameat2); OSError if unsupported."""
    import ctypes
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        fn = libc.renameat2
    except (OSError, AttributeError):
        raise OSError(errno.ENOSYS, "renameat2 not available") from None
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    at_fdcwd, rename_exchange = -100, 2
    if fn(at_fdcwd, os.fsencode(str(a)), at_fdcwd, os.fsencode(str(b)), rename_exchange) != 0:
        err = ctypes.get_errno()
        raise OSError(err, os.strerror(err), str(b))


def _umask():
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _recover(target):
    """Repair what a killed run left beside ``target``: a folder moved aside but not
    swapped back (restored), temporary and old folders (removed)."""
    pattern = glob.escape(str(target.parent / f".{target.name}"))
    olds = sorted(glob.glob(pattern + _OLD + "*"), key=os.path.getmtime)
    if olds and not target.exists():
        os.rename(olds.pop(), target)
    for p in olds + glob.glob(pattern + _TMP + "*"):
        if os.path.isdir(p) and not os.path.islink(p):
            shutil.rmtree(p, ignore_errors=True)
        else:
            with contextlib.suppress(OSError):
                os.unlink(p)


# ------------------------------------------------------------------- the lock
@contextlib.contextmanager
def _locked(target, option):
    lock = target.parent / f".{target.name}{_LOCK}"
    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX: an exclusive create
        fcntl = None
    while True:
        with output_error(lock):
            if fcntl is None:  # pragma: no cover
                try:
                    fd = os.open(lock, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
                except FileExistsError:
                    raise OutputError(_busy(target, option, _owner(lock), lock)) from None
                break
            fd = os.open(lock, os.O_RDWR | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0), 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            raise OutputError(_busy(target, option, _owner(lock), None)) from None
        try:  # the file may have been removed by the run that held it: lock the new one
            same = os.path.samestat(os.fstat(fd), os.stat(lock))
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)
    try:
        os.ftruncate(fd, 0)
        os.write(fd, f"{os.getpid()}\n".encode())
        yield
    finally:
        with contextlib.suppress(OSError):
            os.unlink(lock)
        os.close(fd)


def _owner(lock):
    try:
        return Path(lock).read_text().strip() or "?"
    except OSError:
        return "?"


def _busy(target, option, pid, stale):
    msg = (f"{target}: another seqmine run (process {pid}) is writing this folder; wait "
           f"until it has finished or choose another {option}.")
    if stale:  # pragma: no cover - systems without flock
        msg += f" If no run is active, remove {stale}."
    return msg


# ------------------------------------------------------------------ signals
@contextlib.contextmanager
def _signals_held():
    """SIGINT and SIGTERM wait while the block runs (the swap and the clean-up are
    never cut in half); they are delivered when it ends."""
    if threading.current_thread() is not threading.main_thread() or not hasattr(
            signal, "pthread_sigmask"):
        yield
        return
    held = {signal.SIGINT, signal.SIGTERM}
    before = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, before)


# ------------------------------------------------------------------- errors
_FIXES = {
    errno.ENOSPC: "free some disk space or choose another output folder",
    errno.EFBIG: "the file is larger than allowed here (file-size limit); free space, raise "
                 "the limit or choose another output folder",
    errno.EACCES: "check the permissions or choose another output folder",
    errno.EPERM: "check the permissions or choose another output folder",
    errno.EROFS: "the file system is read-only; choose another output folder",
    errno.ENOTDIR: "a part of the path is a file; choose another output path",
    errno.EISDIR: "a folder is in the way; choose another output path",
    errno.ENAMETOOLONG: "use a shorter output path",
}
if hasattr(errno, "EDQUOT"):
    _FIXES[errno.EDQUOT] = "the disk quota is used up; free space or choose another folder"


@contextlib.contextmanager
def output_error(where, *, staged=None, rename=None):
    """Turn an OSError raised inside the block into a one-line :class:`OutputError`
    naming the path (a path inside the temporary folder ``staged`` is shown as it will
    be called in ``where``)."""
    try:
        yield
    except OutputError:
        raise
    except OSError as exc:
        name = exc.filename
        why = exc.strerror or type(exc).__name__
        if name is None or (rename and str(name) == str(rename[0])):
            name = rename[1] if rename else where
        elif staged is not None and not _inside(name, staged):
            # not one of the outputs: an input or a helper file the command reads
            raise OutputError(f"{name}: cannot be read ({why}); check the path and its "
                              f"permissions. Nothing was written.") from None
        if staged is not None:
            name = _shown(name, staged, where)
        fix = _FIXES.get(exc.errno, "check the path")
        raise OutputError(f"{name}: cannot write ({why}); {fix}. Nothing was written "
                          f"(an earlier run there is unchanged).") from None


def _shown(path, staged, target):
    try:
        return Path(target) / Path(path).relative_to(staged)
    except ValueError:
        return Path(path)
