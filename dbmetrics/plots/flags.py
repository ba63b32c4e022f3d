"""Which drift rows were flagged for a given measure, and that measure's threshold.

The drift query's ``flag_reasons`` lists each test that passed its limits as ``NAME value
(q = Q)``, separated by ``; `` (``cross_entropy`` and ``ece`` for the loss and calibration
tests). A test passes when its q-value is at most ``fdr`` and its effect exceeds its fixed
threshold; the cross-entropy test has no fixed threshold.
"""

from __future__ import annotations

import pyarrow as pa

#: drift output column -> the name its test has in flag_reasons
REASON = {
    "prediction_js": "prediction_js",
    "confidence_psi": "confidence_psi",
    "label_js": "label_js",
    "cross_entropy": "cross_entropy",
    "cross_entropy_delta": "cross_entropy",
    "cross_entropy_z": "cross_entropy",
    "ece": "ece",
    "ece_delta": "ece",
}

#: drift output column -> (parameter holding its fixed limit, drawn on both sides of 0)
THRESHOLD = {
    "prediction_js": ("js_threshold", False),
    "confidence_psi": ("psi_threshold", False),
    "label_js": ("label_js_threshold", False),
    "ece_delta": ("ece_threshold", True),
}


def reason_names(reasons: str | None) -> set[str]:
    """``"prediction_js 0.0303 (q = 1e-09); label_js 0.06 (q = 0.002)"`` ->
    ``{"prediction_js", "label_js"}``.

    >>> sorted(reason_names("cross_entropy +0.69 (z = 7.0, q = 1e-11); prediction_js 0.0303 (q = 1e-09)"))
    ['cross_entropy', 'prediction_js']
    """
    return {part.split()[0] for part in (reasons or "").split("; ") if part.strip()}


def flagged_for(result: pa.Table, measure: str) -> list[bool]:
    """Per row: was it flagged by the test on ``measure`` (False when no test uses it)?"""
    if "flag_reasons" not in result.column_names or measure not in REASON:
        return [False] * result.num_rows
    return [REASON[measure] in reason_names(r) for r in result["flag_reasons"].to_pylist()]


def threshold(measure: str, params: dict) -> tuple[str, float, bool] | None:
    """(parameter, value, both signs) of ``measure``'s fixed limit in ``params``, or None."""
    if measure not in THRESHOLD:
        return None
    name, both = THRESHOLD[measure]
    value = params.get(name)
    if value in (None, ""):
        return None
    return name, float(value), both
