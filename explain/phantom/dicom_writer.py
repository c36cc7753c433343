"""A phantom CT written as a DICOM CT series: one file per slice (CT Image Storage, pydicom).

Every identifier is invented: patient name ``Phantom^Demo``, a patient ID made from the seed,
no birth date, no study date, no institution. UIDs are derived from the case id and the seed
(pydicom's ``generate_uid`` with those as entropy), so the same phantom always gets the same
UIDs. Stored values are HU + 1024 as signed 16-bit integers with RescaleIntercept -1024 and
RescaleSlope 1, so a reader must apply the rescale (DICOM PS3.3 C.11.1) to get HU back.

Attributes follow the CT Image IOD (DICOM PS3.3 A.3): Patient, General Study, General Series,
Frame of Reference, General Equipment, General Image, Image Plane, Image Pixel, CT Image and
SOP Common modules.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import SimpleITK as sitk

__all__ = ["PATIENT_NAME", "write_ct_series", "series_uids"]

PATIENT_NAME = "Phantom^Demo"
_CT_IMAGE_STORAGE = "1.2.840.10008.5.1.4.1.1.2"
_OFFSET = 1024


def series_uids(case_id, seed):
    """Study, Series and Frame of Reference UIDs of a phantom (dict), fixed by id and seed."""
    from pydicom.uid import generate_uid

    return {kind: str(generate_uid(entropy_srcs=["culprit-lens phantom", str(case_id),
                                                 str(seed), kind]))
            for kind in ("study", "series", "frame_of_reference")}


def _patient_and_study(ds, case_id, seed, uids):
    ds.PatientName = PATIENT_NAME
    ds.PatientID = f"PH{int(seed):08d}"
    ds.PatientBirthDate = ""
    ds.PatientSex = ""
    ds.StudyInstanceUID = uids["study"]
    ds.StudyDate = ""
    ds.StudyTime = ""
    ds.ReferringPhysicianName = ""
    ds.StudyID = ""
    ds.AccessionNumber = ""
    ds.StudyDescription = "synthetic phantom"
    ds.Modality = "CT"
    ds.SeriesInstanceUID = uids["series"]
    ds.SeriesNumber = 1
    ds.SeriesDescription = f"culprit-lens phantom {case_id}"
    ds.FrameOfReferenceUID = uids["frame_of_reference"]
    ds.PositionReferenceIndicator = ""
    ds.Manufacturer = "culprit-lens phantom"
    ds.ManufacturerModelName = "synthetic"


def _slice_dataset(image, k, stored, common):
    from pydicom.dataset import Dataset, FileMetaDataset
    from pydicom.uid import ExplicitVRLittleEndian, generate_uid

    direction = np.asarray(image.GetDirection(), dtype=np.float64).reshape(3, 3)
    spacing = image.GetSpacing()
    position = image.TransformIndexToPhysicalPoint((0, 0, k))
    sop_uid = str(generate_uid(entropy_srcs=[common.SeriesInstanceUID, str(k)]))
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = _CT_IMAGE_STORAGE
    meta.MediaStorageSOPInstanceUID = sop_uid
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds = Dataset()
    ds.file_meta = meta
    ds.update(common)
    ds.SOPClassUID = _CT_IMAGE_STORAGE
    ds.SOPInstanceUID = sop_uid
    ds.InstanceNumber = k + 1
    ds.ImageType = ["DERIVED", "SECONDARY", "AXIAL"]
    ds.ImagePositionPatient = [f"{v:.6f}" for v in position]
    ds.ImageOrientationPatient = [f"{v:.8f}" for v in (*direction[:, 0], *direction[:, 1])]
    ds.PixelSpacing = [f"{spacing[1]:.6f}", f"{spacing[0]:.6f}"]   # between rows, between columns
    ds.SliceThickness = f"{spacing[2]:.6f}"
    ds.SliceLocation = f"{position[2]:.6f}"
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.Rows, ds.Columns = stored.shape[1], stored.shape[2]
    ds.BitsAllocated, ds.BitsStored, ds.HighBit, ds.PixelRepresentation = 16, 16, 15, 1
    ds.RescaleIntercept, ds.RescaleSlope, ds.RescaleType = str(-_OFFSET), "1", "HU"
    ds.KVP = ""
    ds.AcquisitionNumber = 1
    ds.PixelData = np.ascontiguousarray(stored[k]).tobytes()
    return ds


def write_ct_series(image, folder, *, case_id, seed):
    """Write ``image`` (HU) as a DICOM CT series into ``folder``, one file per slice.

    Parameters
    ----------
    image : SimpleITK.Image
        3D, HU (rounded to whole numbers on writing), any orthonormal direction.
    folder : str or Path
        Created if needed; files ``ct-0000.dcm``, ``ct-0001.dcm``, ... in slice order.
    case_id : str
    seed : int

    Returns
    -------
    dict
        The ``study``, ``series`` and ``frame_of_reference`` UIDs written.
    """
    from pydicom.dataset import Dataset

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    hu = np.rint(sitk.GetArrayViewFromImage(image)).astype(np.int32) + _OFFSET
    stored = np.clip(hu, -32768, 32767).astype("<i2")
    uids = series_uids(case_id, seed)
    common = Dataset()
    _patient_and_study(common, case_id, seed, uids)
    for k in range(stored.shape[0]):
        ds = _slice_dataset(image, k, stored, common)
        ds.save_as(folder / f"ct-{k:04d}.dcm", enforce_file_format=True)
    return uids
