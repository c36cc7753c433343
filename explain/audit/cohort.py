"""The cohort table of an audit: one row per case, a ``case`` column of manifest paths.

Every other column is the reviewer's metadata and is copied into the results unchanged. The case
id of a row comes from its manifest (``case_id`` of case.json); when the manifest cannot be read
the row still gets an id (the cohort's own ``case_id`` column, else the manifest's folder name)
and, later, a ``failed`` row with the reason.

Case ids become folder names under ``DIR/cases/``. An id that names a path (``/``, ``\\``,
``..``, a leading ``.``, control characters, or empty) is refused before any work; any other id
is mapped to a safe folder name (letters, digits, ``-``, ``_`` and ``.``, with a short hash
of the id added when anything had to change); ``DIR/folders.json`` records the mapping.
"""

from __future__ import annotations

import csv
import hashlib
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError

__all__ = ["CohortRow", "Cohort", "read_cohort", "safe_folder_name"]

_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


@dataclass(frozen=True)
class CohortRow:
    """One case of the cohort.

    Attributes
    ----------
    index : int
        0-based position in the cohort table (the order of ``cases.csv``).
    case : str
        The ``case`` cell as written (a manifest path relative to the cohort table).
    manifest : Path
        That path resolved against the cohort table's folder.
    case_id : str
        From the manifest, else from the cohort (see the module docstring).
    folder : str
        Safe folder name under ``DIR/cases/``.
    metadata : dict of str to str
        Every other column of the row, in the table's order.
    """

    index: int
    case: str
    manifest: Path
    case_id: str
    folder: str
    metadata: dict = field(repr=False)


@dataclass(frozen=True)
class Cohort:
    """A validated cohort table: ``path``, ``metadata_columns`` and ``rows``."""

    path: Path
    metadata_columns: tuple
    rows: tuple = field(repr=False)

    def __repr__(self):
        return f"Cohort({str(self.path)!r}, {len(self.rows)} cases)"


def safe_folder_name(case_id):
    """A folder name for ``case_id`` that stays inside its parent.

    Examples
    --------
    >>> safe_folder_name("case-0001")
    'case-0001'
    >>> safe_folder_name("patient 7: LAD")
    'patient_7_LAD-5872ccda'
    """
    cleaned = _SAFE.sub("_", case_id).strip("._") or "case"
    if cleaned == case_id:
        return cleaned
    digest = hashlib.sha256(case_id.encode("utf-8")).hexdigest()[:8]
    return f"{cleaned[:80]}-{digest}"


def _unsafe(case_id):
    """Why ``case_id`` cannot be used at all, or None."""
    if not case_id.strip():
        return "it is empty"
    if "/" in case_id or "\\" in case_id:
        return "it contains a path separator"
    if case_id.startswith(".") or ".." in case_id:
        return "it starts with '.' or contains '..'"
    if any(ord(ch) < 32 or ord(ch) == 127 for ch in case_id):
        return "it contains control characters"
    return None


def _manifest_case_id(manifest):
    """``case_id`` of a manifest, or None when it cannot be read (the case fails later)."""
    path = manifest / "case.json" if manifest.is_dir() else manifest
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    value = data.get("case_id") if isinstance(data, dict) else None
    return value if isinstance(value, str) else None


def _read_table(path):
    if not path.is_file():
        raise InputError(f"--cohort {path}: file not found; give a CSV with a 'case' column "
                         "(culprit-lens phantom --count writes one)")
    try:
        with path.open(newline="", encoding="utf-8") as handle:
            reader = csv.DictReader(handle)
            columns = reader.fieldnames
            rows = list(reader)
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise InputError(f"--cohort {path}: cannot be read as CSV ({exc})") from None
    if not columns or "case" not in columns:
        raise InputError(f"--cohort {path}: no 'case' column (columns: {columns or 'none'}); "
                         "add one holding each case's case.json path, relative to the CSV")
    if len(set(columns)) != len(columns):
        raise InputError(f"--cohort {path}: a column name appears twice ({columns})")
    if not rows:
        raise InputError(f"--cohort {path}: no rows; list at least one case")
    return columns, rows


def read_cohort(path):
    """Read and check a cohort table before any work.

    Parameters
    ----------
    path : str or Path
        CSV with a ``case`` column (manifest paths relative to the CSV); other columns are kept.

    Returns
    -------
    Cohort

    Raises
    ------
    InputError
        Missing file, no ``case`` column, an empty ``case`` cell, duplicate case ids, an unsafe
        case id, or two ids that map to the same folder.
    """
    path = Path(path)
    columns, raw = _read_table(path)
    meta_columns = tuple(c for c in columns if c != "case")
    rows, by_id, by_folder = [], {}, {}
    for index, record in enumerate(raw):
        line = index + 2  # header is line 1
        cell = (record.get("case") or "").strip()
        if not cell:
            raise InputError(f"--cohort {path}: line {line}: empty 'case' cell; give a case.json path")
        manifest = (path.parent / cell)
        case_id = _manifest_case_id(manifest)
        if case_id is None:
            case_id = (record.get("case_id") or "").strip() or manifest.parent.name or cell
        why = _unsafe(case_id)
        if why:
            raise InputError(f"--cohort {path}: line {line}: case id {case_id!r} is unsafe as a "
                             f"folder name ({why}); change the case_id in its manifest")
        if case_id in by_id:
            raise InputError(f"--cohort {path}: line {line}: case id {case_id!r} already used on "
                             f"line {by_id[case_id]}; every case needs its own id")
        folder = safe_folder_name(case_id)
        if folder in by_folder:
            raise InputError(f"--cohort {path}: line {line}: case id {case_id!r} maps to the same "
                             f"folder {folder!r} as line {by_folder[folder]}; rename one")
        by_id[case_id], by_folder[folder] = line, line
        metadata = {c: ("" if record.get(c) is None else str(record.get(c))) for c in meta_columns}
        rows.append(CohortRow(index, cell, manifest, case_id, folder, metadata))
    return Cohort(path=path, metadata_columns=meta_columns, rows=tuple(rows))
