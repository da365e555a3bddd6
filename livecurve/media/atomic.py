"""All-or-nothing output files, and lossless stills.

Every output livecurve writes (clips, stills, LUTs, decks) goes first to a
hidden temporary file in the destination folder; only when the writer finished
without error is it flushed to disk (``fsync``) and renamed over the final
name (POSIX ``rename(2)`` is atomic within one file system).  An exception or
Ctrl-C (KeyboardInterrupt) inside the block removes the temporary file and
surfaces as :class:`~livecurve.errors.OutputError` saying that no output was
written.  A full disk (``ENOSPC``, or ``EDQUOT`` over quota) is named as such.

The temporary name keeps the final extension, ``.<name>.partial-<pid>-<random><ext>``,
so encoders that choose a container from the extension (ffmpeg) still do.  The process id
in the name lets a later run tell a partial file left by a killed run (its process is gone)
from one another run is writing right now: the former are removed before writing the same
output again (:func:`remove_stale_partials`).

Outputs made of several files (``drift``, ``spread``, ``demo``) are built in a hidden
temporary folder beside the target folder and moved in only when every file is complete
(:func:`atomic_folder`).  :func:`check_not_source` refuses an output that is the input
itself (same device and inode, whatever the spelling), even with ``--force``.

Stills are written losslessly with OpenCV's encoders: PNG (RFC 2083 / ISO/IEC
15948, 8 or 16 bits per sample) or TIFF (uncompressed or LZW, 8 or 16 bits).
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import secrets
import shutil
from pathlib import Path

import cv2
import numpy as np

from livecurve.errors import LivecurveError, OutputError, OutputInterrupted

#: Endings :func:`write_still` accepts.
STILL_OUTPUT_EXTENSIONS = (".png", ".tif", ".tiff")

_FULL = (errno.ENOSPC, errno.EDQUOT)


#: Below this much free space a failed write is reported as a full disk even when the
#: writer (an image encoder, say) did not pass the ENOSPC error on.
_NEARLY_FULL_BYTES = 1 << 20


def temp_name(path: Path) -> Path:
    """Hidden sibling of *path* with the same extension: ``.<name>.partial-<pid>-<hex><ext>``."""
    return path.with_name(
        f".{path.stem}.partial-{os.getpid()}-{secrets.token_hex(4)}{path.suffix}")


def _partial_pattern(path: Path) -> re.Pattern:
    return re.compile(rf"^\.{re.escape(path.stem)}\.partial-(?:(\d+)-)?[0-9a-f]{{8}}"
                      rf"{re.escape(path.suffix)}$")


def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError):
        return True
    return True


def remove_stale_partials(path) -> list[Path]:
    """Remove temporary files or folders of output *path* left by a run that was killed.

    A partial belongs to *path* when it is named ``.<stem>.partial-<pid>-<hex><ext>`` in the
    same folder; it is stale when no process with that id is running (names without an id,
    from older versions, count as stale).  Partials of a live process are left alone.

    Returns
    -------
    list of pathlib.Path
        What was removed.
    """
    p = Path(os.fspath(path))
    folder = p.parent if str(p.parent) else Path(".")
    pat = _partial_pattern(p)
    removed = []
    try:
        entries = list(folder.iterdir())
    except OSError:
        return removed
    for e in entries:
        m = pat.match(e.name)
        if not m or (m.group(1) is not None and _pid_alive(int(m.group(1)))):
            continue
        try:
            if e.is_dir() and not e.is_symlink():
                shutil.rmtree(e)
            else:
                e.unlink()
            removed.append(e)
        except OSError:
            pass
    return removed


def check_not_source(source, output) -> None:
    """Refuse an *output* that is the *source* itself, even with ``--force``.

    Same file means the same device and inode (any spelling, hard links, symbolic links) or,
    for numbered image sequences that do not exist under their pattern name, the same
    resolved pattern.

    Raises
    ------
    OutputError
        The output would replace the source.
    """
    src, out = os.fspath(source), os.fspath(output)
    same = False
    try:
        a, b = os.stat(src), os.stat(out)
        same = (a.st_dev, a.st_ino) == (b.st_dev, b.st_ino)
    except (OSError, ValueError):
        try:
            same = "%" in out and os.path.realpath(src) == os.path.realpath(out)
        except (OSError, ValueError):
            same = False
    if same:
        raise OutputError(f"{out}: is the source '{src}' itself; choose another output name "
                          "(--force never replaces the source)")


def check_target(path, *, force: bool = False) -> Path:
    """Validate an output path without touching it.

    Raises
    ------
    OutputError
        Exists and *force* is off; is a folder; its folder does not exist or is not writable.
    """
    p = Path(os.fspath(path))
    if p.is_dir():
        raise OutputError(f"{p}: is a folder; give a file name")
    if p.exists() and not force:
        raise OutputError(f"{p}: exists; use --force to overwrite it")
    folder = p.parent if str(p.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"{p}: folder {folder} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(f"{p}: folder {folder} is not writable")
    return p


def is_disk_full(exc: BaseException) -> bool:
    """True when *exc* (or an exception it was raised from) is ENOSPC/EDQUOT."""
    seen = 0
    while exc is not None and seen < 10:
        if isinstance(exc, OSError) and exc.errno in _FULL:
            return True
        exc = exc.__cause__ or exc.__context__
        seen += 1
    return False


def nearly_full(folder) -> bool:
    """True when the file system holding *folder* has less than 1 MiB left for us."""
    try:
        st = os.statvfs(folder)
    except (OSError, AttributeError):
        return False
    return st.f_bavail * st.f_frsize < _NEARLY_FULL_BYTES


def interrupted_error(path: Path, exc: BaseException) -> OutputInterrupted:
    """The message (and exit status 128 + signal) for a stop signal while writing *path*."""
    signum = getattr(exc, "signum", 2)
    return OutputInterrupted(f"{path}: interrupted; no output was written", signum=signum)


def disk_full_error(path: Path) -> OutputError:
    """The message for a full disk while writing *path*."""
    folder = path.parent if str(path.parent) else Path(".")
    return OutputError(f"{path}: disk full (no space left in {folder.resolve()}); "
                       "no output was written")


def _remove(p: Path) -> None:
    with contextlib.suppress(FileNotFoundError):
        p.unlink()


def _fsync_file(p: Path) -> None:
    fd = os.open(p, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


@contextlib.contextmanager
def atomic_output(path, *, force: bool = False):
    """Write an output all-or-nothing.

    Parameters
    ----------
    path : str or os.PathLike
        Final file name.
    force : bool, keyword-only
        Replace an existing file.

    Yields
    ------
    pathlib.Path
        Temporary path (same folder, hidden, same extension) to write to.  It exists
        (empty) when yielded; the writer may replace it.

    Raises
    ------
    OutputError
        Target exists without *force*, folder missing, disk full, the writer left no
        data, or the block raised (the original exception is chained).
    """
    final = check_target(path, force=force)
    remove_stale_partials(final)
    tmp = temp_name(final)
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        os.close(fd)
    except OSError as exc:
        if exc.errno in _FULL:
            raise disk_full_error(final) from exc
        raise OutputError(f"{final}: cannot create a file in its folder: {exc.strerror}") from exc
    try:
        yield tmp
        if not tmp.is_file() or tmp.stat().st_size == 0:
            raise OutputError(f"{final}: the writer produced no data; no output was written")
        _fsync_file(tmp)
        if force:
            os.replace(tmp, final)
        else:
            try:
                os.link(tmp, final)  # fails if the name appeared meanwhile: never clobber
            except FileExistsError as exc:
                raise OutputError(f"{final}: exists; use --force to overwrite it") from exc
            except OSError:
                if final.exists():
                    raise OutputError(f"{final}: exists; use --force to overwrite it") from None
                os.replace(tmp, final)  # file systems without hard links
            _remove(tmp)
        _fsync_dir(final.parent if str(final.parent) else Path("."))
    except KeyboardInterrupt as exc:
        _remove(tmp)
        raise interrupted_error(final, exc) from exc
    except OutputError as exc:
        _remove(tmp)
        if not isinstance(exc, OutputInterrupted) and "disk full" not in str(exc) \
                and "exists" not in str(exc) \
                and nearly_full(final.parent if str(final.parent) else Path(".")):
            raise disk_full_error(final) from exc
        raise
    except Exception as exc:
        _remove(tmp)
        if is_disk_full(exc) or nearly_full(final.parent if str(final.parent) else Path(".")):
            raise disk_full_error(final) from exc
        detail = str(exc) if isinstance(exc, LivecurveError) else f"{type(exc).__name__}: {exc}"
        raise OutputError(f"{final}: no output was written: {detail}") from exc
    except BaseException:
        _remove(tmp)  # SystemExit, GeneratorExit: clean up, let them through
        raise


def check_folder_target(folder, names, *, force: bool = False) -> Path:
    """Validate a multi-file output folder without touching anything.

    Raises
    ------
    OutputError
        *folder* is a file; one of *names* is in it already and *force* is off (or is a
        folder); the nearest existing parent folder is not writable.
    """
    final = Path(os.fspath(folder))
    if final.exists() and not final.is_dir():
        raise OutputError(f"{final}: exists and is not a folder; give a folder name")
    if final.is_dir():
        for n in names:
            if (final / n).is_dir():
                raise OutputError(f"{final / n}: is a folder; cannot write a file there")
        clash = [n for n in names if (final / n).exists() or (final / n).is_symlink()]
        if clash and not force:
            raise OutputError(f"{final}: already holds {', '.join(clash)}; use --force to "
                              "replace them")
    anc = final.parent if str(final.parent) else Path(".")
    while not anc.exists():
        if anc == anc.parent:
            break
        anc = anc.parent
    if not anc.is_dir():
        raise OutputError(f"{final}: {anc} is not a folder")
    if not os.access(anc, os.W_OK | os.X_OK):
        raise OutputError(f"{final}: folder {anc.resolve()} is not writable")
    return final


@contextlib.contextmanager
def atomic_folder(folder, names, *, force: bool = False):
    """Write several files into *folder* all-or-nothing.

    The files are written into a hidden temporary folder beside *folder*
    (``.<name>.partial-<pid>-<hex>``); when the block ends without error every one of
    *names* must be there, and they are moved into *folder* (created if missing; a new
    folder is renamed in whole).  On error, Ctrl-C, SIGTERM or SIGHUP the temporary folder and
    any parent folders this call created are removed, and nothing in *folder* changed.

    Parameters
    ----------
    folder : str or os.PathLike
        The target folder.
    names : sequence of str
        File names the block writes into the temporary folder.
    force : bool, keyword-only
        Replace files of the same names already in *folder*.

    Yields
    ------
    pathlib.Path
        The temporary folder to write into.

    Raises
    ------
    OutputError
        As :func:`check_folder_target`; a file was not produced; disk full; interrupted
        (:class:`~livecurve.errors.OutputInterrupted`, exit 128 + signal).
    """
    final = check_folder_target(folder, names, force=force)
    parent = final.parent if str(final.parent) else Path(".")
    missing = []
    anc = parent
    while not anc.exists() and anc != anc.parent:
        missing.append(anc)
        anc = anc.parent
    created: list[Path] = []
    tmp = temp_name(final)
    try:
        for d in reversed(missing):
            d.mkdir()
            created.append(d)
        remove_stale_partials(final)
        tmp.mkdir()
    except OSError as exc:
        _undo(None, created)
        if exc.errno in _FULL:
            raise disk_full_error(final) from exc
        raise OutputError(f"{final}: cannot create a folder beside it: {exc.strerror}") from exc
    try:
        yield tmp
        lacking = [n for n in names if not (tmp / n).is_file()]
        if lacking:
            raise OutputError(f"{final}: {', '.join(lacking)} was not produced; no output was "
                              "written")
        for n in names:
            _fsync_file(tmp / n)
        _publish_folder(tmp, final, names, force=force)
        _fsync_dir(parent)
    except KeyboardInterrupt as exc:
        _undo(tmp, created)
        raise interrupted_error(final, exc) from exc
    except OutputError as exc:
        _undo(tmp, created)
        if isinstance(exc, OutputInterrupted):
            raise
        if "disk full" in str(exc) or (nearly_full(parent) and "exists" not in str(exc)):
            raise disk_full_error(final) from exc
        raise
    except Exception as exc:
        _undo(tmp, created)
        if is_disk_full(exc) or nearly_full(parent):
            raise disk_full_error(final) from exc
        detail = str(exc) if isinstance(exc, LivecurveError) else f"{type(exc).__name__}: {exc}"
        raise OutputError(f"{final}: no output was written: {detail}") from exc
    except BaseException:
        _undo(tmp, created)
        raise


def _publish_folder(tmp: Path, final: Path, names, *, force: bool) -> None:
    if not final.exists():
        try:
            os.rename(tmp, final)  # the whole folder appears at once
            return
        except OSError:
            if not final.is_dir():
                raise
    done = []
    for n in names:
        src, dst = tmp / n, final / n
        if force:
            os.replace(src, dst)
        else:
            try:
                os.link(src, dst)  # never clobber a file that appeared meanwhile
            except FileExistsError as exc:
                for d in done:  # take back what this run already moved in
                    _remove(final / d)
                raise OutputError(f"{dst}: exists; use --force to overwrite it") from exc
            _remove(src)
        done.append(n)
    shutil.rmtree(tmp, ignore_errors=True)


def _undo(tmp: Path | None, created: list) -> None:
    if tmp is not None:
        shutil.rmtree(tmp, ignore_errors=True)
    for d in reversed(created):
        with contextlib.suppress(OSError):
            d.rmdir()  # only if still empty


def write_still(path, rgb: np.ndarray, *, force: bool = False) -> Path:
    """Write one picture losslessly as PNG or TIFF, all-or-nothing.

    Parameters
    ----------
    path : str or os.PathLike
        Ends in ``.png``, ``.tif`` or ``.tiff``.
    rgb : numpy.ndarray, shape (H, W, 3) or (H, W), uint8 or uint16
        Full-range R′G′B′ (or grey) code values; uint16 gives a 16-bit file.
    force : bool, keyword-only
        Replace an existing file.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    p = Path(os.fspath(path))
    if p.suffix.lower() not in STILL_OUTPUT_EXTENSIONS:
        raise OutputError(f"{p}: a still must end in one of {', '.join(STILL_OUTPUT_EXTENSIONS)}")
    a = np.asarray(rgb)
    if a.dtype not in (np.uint8, np.uint16):
        raise OutputError(f"{p}: picture samples are {a.dtype}; give uint8 or uint16 code values")
    if not (a.ndim == 2 or (a.ndim == 3 and a.shape[2] == 3)) or 0 in a.shape:
        raise OutputError(f"{p}: picture has shape {a.shape}; expected (H, W, 3) or (H, W)")
    img = a if a.ndim == 2 else cv2.cvtColor(np.ascontiguousarray(a), cv2.COLOR_RGB2BGR)
    ok, data = cv2.imencode(p.suffix.lower(), img)
    if not ok:
        raise OutputError(f"{p}: the {p.suffix} encoder refused the picture")
    with atomic_output(p, force=force) as tmp, open(tmp, "wb") as fh:
        fh.write(data.tobytes())
    return p
