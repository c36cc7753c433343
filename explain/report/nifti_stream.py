"""Write a box of float32 values placed in a CT's grid as NIfTI-1, one slice at a time.

A full-size scan's overlay is 512 x 512 x 400 float32 (419 MB), and nearly all of it is 0
outside the vessels' bounding box. This writer never builds that volume: it streams the slices
along k through gzip, zeros outside the box. The 348-byte header (and the 4-byte extension flag)
is the one SimpleITK writes for the same geometry and pixel type, with only the three sizes
changed, so SimpleITK reads the file back with the same origin, spacing and direction as a file
it wrote itself. The gzip header carries no time stamp, so the same values give the same bytes.
"""

from __future__ import annotations

import gzip
import os
import struct
import tempfile
from pathlib import Path

import numpy as np
import SimpleITK as sitk

from ..errors import InputError
from ..io import _temp_beside

__all__ = ["write_placed_nifti"]

_DIM_OFFSET = 40       # int16 dim[8] in the NIfTI-1 header
_VOX_OFFSET = 108      # float32 vox_offset


def _header(like):
    """The header SimpleITK writes for a float32 image of ``like``'s geometry, sizes patched."""
    tiny = sitk.Image([1, 1, 1], sitk.sitkFloat32)
    tiny.SetOrigin(like.GetOrigin())
    tiny.SetSpacing(like.GetSpacing())
    tiny.SetDirection(like.GetDirection())
    with tempfile.TemporaryDirectory(prefix="culprit-lens-header-") as tmp:
        path = os.path.join(tmp, "header.nii")
        sitk.WriteImage(tiny, path, False)
        raw = Path(path).read_bytes()
    offset = int(struct.unpack_from("<f", raw, _VOX_OFFSET)[0])
    header = bytearray(raw[:offset])
    ni, nj, nk = (int(n) for n in like.GetSize())
    struct.pack_into("<4h", header, _DIM_OFFSET, 3, ni, nj, nk)
    return bytes(header)


def write_placed_nifti(values, start, like, path):
    """Write ``values`` placed at index ``start`` of ``like``'s grid, 0 elsewhere, as .nii.gz.

    Parameters
    ----------
    values : (nk, nj, ni) array_like, cast to float32
        The box (array order ``[k, j, i]``); may be empty.
    start : (3,) int
        Index ``(i, j, k)`` in ``like`` of the box's first voxel.
    like : SimpleITK.Image
        The CT: the file takes its size, origin, spacing and direction.
    path : str or Path
        Destination ``.nii.gz``; written to a temporary file beside it, then renamed.

    Returns
    -------
    Path
    """
    path = Path(path)
    box = np.asarray(values, dtype=np.float32)
    ni, nj, nk = (int(n) for n in like.GetSize())
    i0, j0, k0 = (int(s) for s in start)
    if box.size and (min(i0, j0, k0) < 0 or i0 + box.shape[2] > ni or j0 + box.shape[1] > nj
                     or k0 + box.shape[0] > nk):
        raise InputError(f"{path.name}: a box of {box.shape[::-1]} voxels at index {start} does "
                         f"not fit the image of {(ni, nj, nk)}; place it in the image it was "
                         "made for")
    path.parent.mkdir(parents=True, exist_ok=True)
    temp = _temp_beside(path)  # as every output file: usual permissions, renamed when complete
    try:
        with open(temp, "wb") as raw, gzip.GzipFile(fileobj=raw, mode="wb", mtime=0,
                                                     filename="") as out:
            out.write(_header(like))
            zero = bytes(4 * ni * nj)
            plane = np.zeros((nj, ni), dtype="<f4")
            for k in range(nk):
                inside = box.size and k0 <= k < k0 + box.shape[0]
                if not inside:
                    out.write(zero)
                    continue
                plane[j0:j0 + box.shape[1], i0:i0 + box.shape[2]] = box[k - k0]
                out.write(plane.tobytes())
                plane[j0:j0 + box.shape[1], i0:i0 + box.shape[2]] = 0.0
        os.replace(temp, path)
    finally:
        if temp.exists():
            temp.unlink()
    return path
