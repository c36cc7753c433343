"""Images in and out (SimpleITK), and writes that never leave half a file behind.

Supported inputs: NIfTI (``.nii``, ``.nii.gz``), NRRD (``.nrrd``), MetaImage (``.mha``, ``.mhd``),
or a folder holding a DICOM CT series, read by :mod:`explain.dicom_in` (stored values rescaled to
Hounsfield units, HU = stored value x RescaleSlope + RescaleIntercept, DICOM PS3.3 C.11.1).
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np
import SimpleITK as sitk

from .errors import InputError

__all__ = [
    "IMAGE_SUFFIXES",
    "EXACT_IN_FLOAT32",
    "read_image",
    "read_volume",
    "write_image",
    "write_text",
    "atomic_output_dir",
    "check_output_dir",
    "same_geometry",
]

IMAGE_SUFFIXES = (".nii", ".nii.gz", ".nrrd", ".mha", ".mhd")


def _suffix(path):
    name = path.name.lower()
    for suffix in sorted(IMAGE_SUFFIXES, key=len, reverse=True):
        if name.endswith(suffix):
            return suffix
    return None


#: Stored pixel types kept as they are: each converts to float32 exactly, so sampling them later
#: gives the very values a float32 copy would, without holding that copy (4 bytes a voxel).
EXACT_IN_FLOAT32 = (sitk.sitkInt8, sitk.sitkUInt8, sitk.sitkInt16, sitk.sitkUInt16,
                    sitk.sitkFloat32)

# Voxels checked for NaN per step: bounds the check's temporary boolean array.
_FINITE_CHUNK = 1 << 24


def _count_not_finite(image):
    """NaN or infinite voxels of a float image, counted a slab at a time."""
    values = sitk.GetArrayViewFromImage(image).reshape(-1)
    return sum(int(np.count_nonzero(~np.isfinite(values[start:start + _FINITE_CHUNK])))
               for start in range(0, values.size, _FINITE_CHUNK))


def read_image(path, *, field="image", series_instance_uid=None):
    """Read a 3D CT volume in HU as a SimpleITK image, kept in its stored pixel type if exact.

    Parameters
    ----------
    path : str or Path
        An image file (``.nii``, ``.nii.gz``, ``.nrrd``, ``.mha``, ``.mhd``) or a folder holding a
        DICOM series.
    field : str
        Where the path came from, for error messages (e.g. ``"case.json: image"``).
    series_instance_uid : str, optional
        Which DICOM series of the folder to read (needed when it holds several).

    Returns
    -------
    SimpleITK.Image
        3D scalar image, geometry (origin, spacing, direction) as stored. Pixel type as stored
        when it converts to float32 exactly (:data:`EXACT_IN_FLOAT32`: 8- and 16-bit integers,
        float32), else float32. A 512 x 512 x 400 int16 CT thus takes 210 MB, not 419 MB;
        sampling converts only the voxels it reads (:mod:`explain.geometry`).

    Raises
    ------
    InputError
        Missing, unreadable, not 3D, not scalar, or containing NaN or infinite values; for
        DICOM, see :func:`explain.dicom_in.read_dicom_series`.
    """
    return read_volume(path, field=field, series_instance_uid=series_instance_uid)[0]


def read_volume(path, *, field="image", series_instance_uid=None):
    """:func:`read_image`, and the DICOM identifiers of the source when it is a DICOM folder.

    Returns
    -------
    image : SimpleITK.Image
    source : explain.dicom_in.DicomSource or None
        None for an image file.
    """
    from .dicom_in import read_dicom_series

    path = Path(path)
    source = None
    if not path.exists():
        raise InputError(f"{field}: {path} does not exist; check the path (relative paths are "
                         "taken from the manifest's folder)")
    try:
        if path.is_dir():
            image, source = read_dicom_series(path, field=field,
                                              series_instance_uid=series_instance_uid)
        else:
            if series_instance_uid is not None:
                raise InputError(f"{field}: series_instance_uid is set but {path.name} is not a "
                                 "DICOM folder; remove the field or point image to the folder")
            if _suffix(path) is None:
                raise InputError(
                    f"{field}: {path.name} is not a supported image; use one of "
                    f"{', '.join(IMAGE_SUFFIXES)} or a DICOM series folder"
                )
            image = sitk.ReadImage(str(path))
    except RuntimeError as exc:
        first = str(exc).strip().splitlines()[-1] if str(exc).strip() else "unknown reason"
        raise InputError(f"{field}: cannot read {path}: {first[:200]}") from None
    if image.GetDimension() != 3:
        raise InputError(f"{field}: {path} is {image.GetDimension()}D; a 3D CT volume is needed")
    if image.GetNumberOfComponentsPerPixel() != 1:
        raise InputError(
            f"{field}: {path} has {image.GetNumberOfComponentsPerPixel()} components per voxel; "
            "a scalar CT volume in HU is needed"
        )
    if image.GetPixelID() not in EXACT_IN_FLOAT32:
        image = sitk.Cast(image, sitk.sitkFloat32)
    if image.GetPixelID() == sitk.sitkFloat32:
        bad = _count_not_finite(image)
        if bad:
            raise InputError(f"{field}: {path} contains {bad} NaN or infinite voxels; fix or "
                             "replace them before explaining")
    return image, source


def same_geometry(a, b, *, tolerance=1e-4):
    """Whether two SimpleITK images share size, origin, spacing and direction.

    Origins and spacings are compared in mm with ``tolerance``; directions element-wise.
    """
    return (
        a.GetSize() == b.GetSize()
        and np.allclose(a.GetOrigin(), b.GetOrigin(), atol=tolerance)
        and np.allclose(a.GetSpacing(), b.GetSpacing(), atol=tolerance)
        and np.allclose(a.GetDirection(), b.GetDirection(), atol=tolerance)
    )


def _umask():
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _temp_beside(path):
    suffix = _suffix(path) or path.suffix
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=suffix, dir=path.parent)
    os.close(fd)
    # mkstemp makes the file private (0600); an output file should have the usual permissions.
    os.chmod(name, 0o666 & ~_umask())
    return Path(name)


def write_image(image, path, *, compress=True):
    """Write a SimpleITK image atomically (to a temporary file beside it, then renamed).

    Parameters
    ----------
    image : SimpleITK.Image
    path : str or Path
        Destination; the format follows the suffix (``.nii.gz`` for overlays).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    temp = _temp_beside(path)
    try:
        sitk.WriteImage(image, str(temp), compress)
        os.replace(temp, path)
    finally:
        if temp.exists():
            temp.unlink()
    return path


def write_text(text, path):
    """Write a text file atomically (UTF-8)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    temp = _temp_beside(path)
    try:
        temp.write_text(text, encoding="utf-8")
        os.replace(temp, path)
    finally:
        if temp.exists():
            temp.unlink()
    return path


def check_output_dir(out_dir, *, force=False, field="--out"):
    """Refuse an output folder before any work is done (the rule :func:`atomic_output_dir` applies).

    Raises :class:`InputError` when ``out_dir`` exists and is not a folder, or is a non-empty
    folder and ``force`` is false. Nothing is created or changed.

    Returns
    -------
    Path
    """
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"{field}: {out_dir} exists and is not a folder; choose another path")
    if out_dir.is_dir() and any(out_dir.iterdir()) and not force:
        raise InputError(
            f"{field}: {out_dir} exists and is not empty; choose a new folder or pass --force "
            "to replace it"
        )
    return out_dir


def _lock_path(out_dir):
    return out_dir.with_name(f".{out_dir.name}.lock")


@contextlib.contextmanager
def _output_lock(out_dir, field):
    """Hold an exclusive lock on ``.<name>.lock`` beside ``out_dir`` while it is being built.

    ``flock`` locks die with their process, so a killed run leaves at most an unlocked, empty
    file that the next run takes over. Where ``fcntl`` is missing (Windows) there is no lock.
    """
    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX
        yield
        return
    path = _lock_path(out_dir)
    busy = InputError(f"{field}: another culprit-lens run is writing into {out_dir}; wait for "
                      "it to finish or choose another folder")
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o666 & ~_umask())
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise busy from None
        # The holder before us may have removed the file between our open and our lock.
        try:
            same = os.stat(path).st_ino == os.fstat(fd).st_ino
        except FileNotFoundError:
            same = False
        if not same:
            raise busy
        try:
            yield
        finally:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(path)
    finally:
        os.close(fd)


@contextlib.contextmanager
def atomic_output_dir(out_dir, *, force=False, field="--out"):
    """Build an output folder in a temporary folder beside it; move it into place on success.

    An existing non-empty ``out_dir`` is refused unless ``force``; with ``force`` it is replaced
    only once the new content is complete. After an error or an interruption (Ctrl-C, SIGTERM
    under :func:`explain.interrupt.signals_as_exceptions`) nothing is left behind. While the
    folder is built, ``.<name>.lock`` beside it is locked: a second run into the same folder is
    refused with :class:`InputError`, and the check for a non-empty folder is repeated under
    the lock, so two runs can never both fill it.

    Yields
    ------
    Path
        The temporary folder to write into.
    """
    from .interrupt import signals_deferred

    out_dir = check_output_dir(out_dir, force=force, field=field)
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    with _output_lock(out_dir, field):
        check_output_dir(out_dir, force=force, field=field)
        temp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", dir=out_dir.parent))
        os.chmod(temp, 0o777 & ~_umask())  # mkdtemp makes it private (0700)
        try:
            yield temp
        except BaseException:
            shutil.rmtree(temp, ignore_errors=True)
            raise
        with signals_deferred():
            _put_in_place(temp, out_dir)


def _put_in_place(temp, out_dir):
    old = None
    if out_dir.exists():
        old = out_dir.with_name(f".{out_dir.name}.old-{os.getpid()}")
        os.replace(out_dir, old)
    os.replace(temp, out_dir)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
