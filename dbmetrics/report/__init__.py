"""The weekly report: one self-contained HTML file (no network, no scripts, images inline).

    gather(con, params, ...) -> ReportData     runs the saved queries the report needs
    report_html(data) -> str                   the page
    build_report(con, params, ...) -> str      both in one call

The page holds, for a period range: the latest periods of each version against the drift
reference, the flagged cells with their reasons, the two most recent versions compared (the
``version_gap`` saved query for the latest periods where both ran, else the rollup of two
versions side by side) with their reliability
diagrams, cross-entropy and label coverage over time, a period x segment heatmap of the main
drift measure with flagged cells marked, and the cautions. Drawing needs matplotlib (the
``plot`` extra); importing this package does not import it.
"""

from .gather import ReportData, gather
from .page import report_html


def build_report(con, params: dict, query_params: dict | None = None, **options) -> str:
    """``report_html(gather(con, params, query_params, **options))``; see ``gather``."""
    return report_html(gather(con, params, query_params, **options))


__all__ = ["ReportData", "build_report", "gather", "report_html"]
