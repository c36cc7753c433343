"""Cohort audits: every case of a cohort explained, the misgraded ones ranked for the reviewer.

Public names
------------
run_audit, AuditResult
    run.py: the whole audit (local processes, this process, or a Dask cluster), resumable.
read_cohort, Cohort, CohortRow, safe_folder_name
    cohort.py: the cohort table, checked before any work.
summarise, wilson_interval
    summary.py: confusion matrix, accuracies, binary views with Wilson intervals.
"""

from .cohort import Cohort, CohortRow, read_cohort, safe_folder_name
from .run import AUDIT_FORMAT, AuditResult, run_audit
from .summary import summarise, wilson_interval

__all__ = [
    "AUDIT_FORMAT",
    "AuditResult",
    "Cohort",
    "CohortRow",
    "read_cohort",
    "run_audit",
    "safe_folder_name",
    "summarise",
    "wilson_interval",
]
