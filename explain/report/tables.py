"""segments.csv: the segment table, one row per segment (columns in docs/report-format.md)."""

from __future__ import annotations

import csv
import io
import math

from ..quality.mass import REGION_NAMES

__all__ = ["segment_rows", "segments_csv"]


def _num(value, digits=6):
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return ""
    return f"{value:.{digits}g}"


def segment_rows(explanation):
    """Header and rows of the segment table as lists of strings."""
    e = explanation
    header = ["id", "abbr", "name", "territory", "length_mm", "culprit", "shapley",
              "leave_one_out", "gradient_x_feature", "winning_channels", "reference_stenosis_percent"]
    for m in e.methods:
        # the peak's profile value, named after its aggregate (explain.mapping.profile)
        aggregate = e.segments[0].locations[m].aggregate if e.segments else "positive"
        header += [f"{m}_peak_arc_mm", f"{m}_extent_start_mm", f"{m}_extent_end_mm",
                   f"{m}_peak_{aggregate}_sum"]
    quality = getattr(e, "quality", None)
    regions = () if quality is None else REGION_NAMES
    for m in e.methods:
        header += [f"{m}_{r}_share" for r in regions]
    rows = []
    for index, s in enumerate(e.segments):
        row = [str(s.id), s.abbr, s.name, s.territory, _num(s.length_mm, 4),
               "yes" if index == e.culprit_index else "no", _num(s.shapley),
               _num(s.leave_one_out), _num(s.gradient_x_feature), str(len(s.winning_channels)),
               _num(s.reference_stenosis_percent, 4)]
        for m in e.methods:
            loc = s.locations[m]
            if loc.peak is None:
                row += ["", "", "", ""]
            else:
                row += [_num(loc.peak.arc_mm, 4), _num(loc.extent_mm[0], 4),
                        _num(loc.extent_mm[1], 4), _num(loc.peak.value)]
        for m in e.methods:
            shares = quality.mass["per_segment"][s.id][m] if regions else {}
            row += [_num(shares[r], 4) for r in regions]
        rows.append(row)
    return header, rows


def segments_csv(explanation):
    """The table as CSV text (comma-separated, header first, ``\\n`` line ends)."""
    header, rows = segment_rows(explanation)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()
