"""All-or-nothing output files, and lossless stills.

Every output livecurve writes (clips, stills, LUTs, decks) goes first to a
hidden temporary file in the destination folder; only when the writer finished
without error is it flushed to disk (``fsync``) and renamed over the final
name (POSIX ``rename(2)`` is atomic within one file system).  An exception or
Ctrl-C (KeyboardInterrupt) inside the block removes the temporary file and
surfaces as :class:`~livecurve.errors.OutputError` saying that no output was
written.  A full disk (``ENOSPC``, or ``EDQUOT`` over quota) is named as such.

The temporary name keeps the final extension, ``.<name>.partial-<random><ext>``,
so encoders that choose a container from the extension (ffmpeg) still do.

Stills are written losslessly with OpenCV's encoders: PNG (RFC 2083 / ISO/IEC
15948, 8 or 16 bits per sample) or TIFF (uncompressed or LZW, 8 or 16 bits).
"""

from __future__ import annotations

import contextlib
import errno
import os
import secrets
from pathlib import Path

import cv2
import numpy as np

from livecurve.errors import LivecurveError, OutputError

#: Endings :func:`write_still` accepts.
STILL_OUTPUT_EXTENSIONS = (".png", ".tif", ".tiff")

_FULL = (errno.ENOSPC, errno.EDQUOT)


def temp_name(path: Path) -> Path:
    """Hidden sibling of *path* with the same extension: ``.<name>.partial-<hex><ext>``."""
    return path.with_name(f".{path.stem}.partial-{secrets.token_hex(4)}{path.suffix}")


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
        raise OutputError(f"{final}: interrupted; no output was written") from exc
    except OutputError:
        _remove(tmp)
        raise
    except Exception as exc:
        _remove(tmp)
        if is_disk_full(exc):
            raise disk_full_error(final) from exc
        detail = str(exc) if isinstance(exc, LivecurveError) else f"{type(exc).__name__}: {exc}"
        raise OutputError(f"{final}: no output was written: {detail}") from exc
    except BaseException:
        _remove(tmp)  # SystemExit, GeneratorExit: clean up, let them through
        raise


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
