"""The health report of a prediction log: `check_log(con, params) -> Report`.

params are the saved queries' column roles (logs, time_col, scores_col, scores_kind, label_col,
version_col, labels, id_col, classes), grain, and the check's own target_col, tolerance and
require_labels; see params.py. The report says what schema was found, rows per period and
version, K per version, and bad rows by reason; `Report.clean` is False when a problem is
found. Nothing is loaded into Python: every query is a GROUP BY over the log.
"""

from .inspect_log import check_log
from .params import info
from .report import Issue, Report

__all__ = ["Issue", "Report", "check_log", "info"]
