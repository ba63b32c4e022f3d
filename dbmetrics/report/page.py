"""The report page: HTML with its style inline and its pictures as ``data:`` URIs.

Nothing on the page is fetched: no scripts, no web fonts (the reader's own sans-serif), no
links to other files. Every value from the data is HTML-escaped. Pictures use the plots'
Okabe-Ito colours and the heatmap ``cividis``; flagged cells in tables are marked with the
word, not with a colour alone.
"""

from __future__ import annotations

import base64
import datetime as dt
import html

import pyarrow as pa

from dbmetrics import __version__
from dbmetrics.cli.textable import number, safe
from dbmetrics.errors import DbmetricsError
from dbmetrics.kernels.significance import Z95
from dbmetrics.plots.labels import metric_label
from dbmetrics.report.gather import ReportData

CAUTIONS = (
    "These are statistics of a sample. Small segments give noisy numbers: read the standard "
    "errors and the row counts before acting, and expect some flags by chance when you look "
    "at many cells. A model calibrated on one population need not be calibrated on another, "
    "and a stable cross-entropy does not mean every group is served equally well. Where these "
    "numbers feed decisions about people (credit, hiring, access to services, ...), they are "
    "one input to a human review under the rules, policies and oversight that apply where you "
    "operate, not a decision in themselves."
)

STYLE = """
body { font-family: sans-serif; color: #1a1a1a; background: #ffffff; margin: 2em auto;
       max-width: 70em; padding: 0 1.5em; line-height: 1.45; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { font-size: 1.25em; margin-top: 2em; border-bottom: 1px solid #cccccc; }
p.meta { color: #555555; margin-top: 0; }
table { border-collapse: collapse; margin: 0.8em 0; font-size: 0.9em; }
th, td { padding: 0.25em 0.7em; border-bottom: 1px solid #e2e2e2; text-align: left;
         vertical-align: top; }
th { background: #f2f2f2; }
td:first-child { white-space: nowrap; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.flagged td { background: #fff1d6; }
tr.reference td { background: #eef4fa; font-style: italic; }
figure { margin: 1em 0; }
figure img { width: 100%; max-width: 56em; height: auto; border: 1px solid #eeeeee; }
figcaption { color: #555555; font-size: 0.9em; }
.cautions { background: #f6f6f6; padding: 0.8em 1em; border-left: 4px solid #0072B2; }
"""


def report_html(data: ReportData) -> str:
    """The whole page for ``data`` as one HTML document."""
    from dbmetrics import plots

    plots.require_matplotlib()
    range_text = f"{data.grain}s {data.start} to {data.end} (first days)"
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(data.title)}</title>",
        f"<style>{STYLE}</style>",
        "</head>",
        "<body>",
        f"<h1>{_e(data.title)}</h1>",
        f'<p class="meta">{_e(range_text)}; source {_e(data.logs)}; written '
        f"{dt.date.today()} by dbmetrics {_e(__version__)}.</p>",
        _summary(data),
        _latest(data),
        _flagged(data),
        _versions(data),
        _heatmap(data),
        _labels(data),
        '<h2 id="cautions">Cautions</h2>',
        f'<p class="cautions">{_e(CAUTIONS)}</p>',
        "</body>",
        "</html>",
    ]
    return "\n".join(p for p in parts if p) + "\n"


def _summary(data: ReportData) -> str:
    flagged = _rows(data.cells, lambda r: bool(r["flagged"]))
    latest = [r for r in flagged if r["period"] in data.latest]
    versions = sorted({str(v) for v in data.rollup[data.version_col].to_pylist()})
    where = f" by {data.segment}" if data.segment else ""
    text = (
        f"{len(latest)} flagged cell{'s' if len(latest) != 1 else ''}{where} in the latest "
        f"{len(data.latest)} period{'s' if len(data.latest) != 1 else ''} "
        f"({data.latest[0]} to {data.latest[-1]}), {len(flagged)} in the whole range; "
        f"versions: {', '.join(versions)}. Reference window: "
        f"{_ref(data)}."
    )
    return f"<p>{_e(text)}</p>"


def _ref(data: ReportData) -> str:
    start, end = data.thresholds.get("ref_start"), data.thresholds.get("ref_end")
    if start or end:
        return f"{start or 'the first day'} to {end or 'the end of the 4th period'}"
    return "the first four periods of the data (drift's default)"


def _latest(data: ReportData) -> str:
    """Per version: the reference, then each latest period with its changes."""
    drift = {(r["period"], r[data.version_col]): r for r in _rows(data.drift)}
    head = [
        "period",
        data.version_col,
        "rows",
        "label coverage",
        "cross-entropy (nats) ± 95%",
        "change (nats)",
        "z",
        "accuracy",
        "ECE",
        "prediction JS (nats)",
        "confidence PSI",
        "flagged for",
    ]
    body = []
    rollup = _rows(data.rollup)
    versions = sorted({r[data.version_col] for r in rollup}, key=str)
    for version in versions:
        mine = [r for r in rollup if r[data.version_col] == version and r["period"] in data.latest]
        if not mine:
            continue
        reference = next(
            (drift[(r["period"], version)] for r in mine if (r["period"], version) in drift), None
        )
        if reference is not None:
            body.append(
                _tr(
                    [
                        f"reference ({reference['reference']})",
                        version,
                        reference["ref_scored_rows"],
                        None,
                        reference["ref_cross_entropy"],
                        None,
                        None,
                        None,
                        reference["ref_ece"],
                        None,
                        None,
                        "",
                    ],
                    "reference",
                )
            )
        for r in mine:
            d = drift.get((r["period"], version), {})
            se = r["cross_entropy_se"]
            loss = (
                None
                if r["cross_entropy"] is None
                else f"{number(r['cross_entropy'])}"
                + ("" if se is None else f" ± {number(Z95 * se, 2)}")
            )
            body.append(
                _tr(
                    [
                        r["period"],
                        version,
                        r["rows"],
                        r["label_coverage"],
                        loss,
                        d.get("cross_entropy_delta"),
                        d.get("cross_entropy_z"),
                        r["accuracy"],
                        r["ece"],
                        d.get("prediction_js"),
                        d.get("confidence_psi"),
                        d.get("flag_reasons") or "",
                    ],
                    "flagged" if d.get("flagged") else "",
                )
            )
    return (
        f'<h2 id="latest">Latest {len(data.latest)} periods against the reference</h2>'
        "<p>Each version's rollup for the latest periods, under a row with its drift reference "
        "(cross-entropy and ECE of the reference window). Change and z: the cell's "
        "cross-entropy minus the reference's, and that change in combined standard errors.</p>"
        + _table(head, body)
    )


def _flagged(data: ReportData) -> str:
    """The latest periods' flagged cells in a table, every flagged cell of the range below."""
    columns = ["period", data.version_col] + ([data.segment] if data.segment else [])
    rows = _rows(data.cells, lambda r: bool(r["flagged"]))
    head = [*columns, "rows", "reasons (test: value)"]

    def table(chosen):
        return _table(
            head, [_tr([r[c] for c in columns] + [r["rows"], r["flag_reasons"]]) for r in chosen]
        )

    parts = [
        '<h2 id="flagged">Flagged cells</h2>',
        "<p>Cells flagged by the drift query, with the tests that passed their limits. Limits: "
        + _e(_limits(data))
        + ".</p>",
    ]
    latest = [r for r in rows if r["period"] in data.latest]
    parts.append(table(latest) if latest else "<p>No cell of the latest periods is flagged.</p>")
    if len(rows) > len(latest):
        parts.append(
            f"<details><summary>All {len(rows)} flagged cells of the range</summary>"
            + table(rows)
            + "</details>"
        )
    return "\n".join(parts)


def _limits(data: ReportData) -> str:
    t = data.thresholds
    return (
        f"q-value (Benjamini-Hochberg, over every test of the drift table) at most "
        f"{t.get('fdr')}, and prediction_js > {t.get('js_threshold')}, confidence_psi > "
        f"{t.get('psi_threshold')}, label_js > {t.get('label_js_threshold')}, |ece_delta| > "
        f"{t.get('ece_threshold')} (the cross-entropy test: the q-value alone); "
        f"cells under {t.get('min_rows')} rows are never flagged"
    )


def _versions(data: ReportData) -> str:
    from dbmetrics import plots

    parts = ['<h2 id="versions">Versions compared</h2>', _gap(data) or _side_by_side(data)]
    version = data.version_col
    calibration = data.calibration
    if calibration.num_rows:
        parts.append(
            _figure(
                lambda: plots.reliability_figure(
                    calibration, version, (version,), None, data.grain
                ),
                "Reliability diagram per version, bins pooled over the range",
                "Accuracy against confidence per confidence bin; the diagonal is perfect "
                "calibration, the lower panel each version's share of rows per bin.",
            )
        )
        gaps = plots.confidence_gap(calibration, (version,))
        parts.append(
            _figure(
                lambda: plots.trend_figure(gaps, "confidence_gap", version, (version,), data.grain),
                "Calibration gap over time",
                "Mean confidence minus accuracy per period: above 0 the version is over-confident.",
                lambda ax: ax.axhline(0, color="#777777", linewidth=0.8, zorder=1),
            )
        )
    parts.append(
        _figure(
            lambda: plots.trend_figure(
                data.rollup, "cross_entropy", version, (version,), data.grain
            ),
            "Cross-entropy over time",
            "Mean cross-entropy with 95% intervals.",
        )
    )
    return "\n".join(parts)


def _gap(data: ReportData) -> str | None:
    """version_gap for the latest periods where both versions ran; None when there are none."""
    rows = _rows(data.gap, lambda r: r["form"] is not None) if data.gap is not None else []
    if not rows:
        return None
    periods = sorted({r["period"] for r in rows})[-len(data.latest) :]
    a, b = rows[0]["version_a"], rows[0]["version_b"]
    head = ["period", "metric", a, b, f"{b} - {a}", "95% interval", "p-value", "form"]
    body = [
        _tr(
            [
                r["period"],
                r["metric"].replace("_", " "),
                r["value_a"],
                r["value_b"],
                r["difference"],
                f"{_text(r['ci_low'])} to {_text(r['ci_high'])}"
                if r["ci_low"] is not None
                else None,
                r["p_value"],
                r["form"],
            ]
        )
        for r in rows
        if r["period"] in periods
    ]
    return (
        f"<p>{_e(str(b))} against {_e(str(a))} in the latest periods where both ran "
        "(<code>version_gap</code>): each metric of both, the difference with its 95% interval "
        "and the p-value of no difference. <em>paired</em>: both versions scored the same "
        "predictions (matched by id), and every number is over those pairs; <em>unpaired</em>: "
        "each version over its own rows. Cross-entropy in nats; lower is better except for "
        "accuracy.</p>" + _table(head, body)
    )


def _side_by_side(data: ReportData) -> str:
    """The two versions with the most rows in the latest periods, per period where either ran."""
    version = data.version_col
    rows = _rows(data.rollup)
    counts: dict = {}
    for r in rows:
        if r["period"] in data.latest:
            counts[r[version]] = counts.get(r[version], 0) + r["rows"]
    pair = sorted(counts, key=lambda v: (-counts[v], str(v)))[:2]
    if len(pair) < 2:
        others = sorted({r[version] for r in rows} - set(pair), key=str)
        pair += others[-1:]
    if len(pair) < 2:
        return "<p>Only one version ran in the range; there is nothing to compare.</p>"
    pair = sorted(pair, key=str)
    both = sorted(
        {r["period"] for r in rows if r[version] == pair[0]}
        & {r["period"] for r in rows if r[version] == pair[1]}
    )
    periods = both or sorted({r["period"] for r in rows if r[version] in pair})[-len(data.latest) :]
    by = {(r["period"], r[version]): r for r in rows}
    metrics = ("rows", "cross_entropy", "accuracy", "ece", "mean_confidence")
    head = ["period"] + [f"{m.replace('_', ' ')} {v}" for m in metrics for v in pair]
    body = [_tr([p] + [by.get((p, v), {}).get(m) for m in metrics for v in pair]) for p in periods]
    where = "the periods where both ran" if both else "the latest periods (they never ran together)"
    return (
        f"<p>{_e(str(pair[0]))} and {_e(str(pair[1]))} side by side over {where}: the rollup "
        "per version (cross-entropy in nats, ECE and mean confidence as probabilities).</p>"
        + _table(head, body)
    )


def _heatmap(data: ReportData) -> str:
    from dbmetrics import plots

    rows = (data.version_col, data.segment) if data.segment else (data.version_col,)
    label = metric_label(data.measure)
    return '<h2 id="heatmap">Drift map</h2>' + _figure(
        lambda: plots.heatmap_figure(data.cells, data.measure, rows, data.grain),
        f"{label[0].upper()}{label[1:]} per period and {' and '.join(rows)}",
        "Each cell compares a period with the reference window; a cross marks a cell flagged "
        "for this measure, a dot a cell flagged only for another reason. White: no rows.",
    )


def _labels(data: ReportData) -> str:
    from dbmetrics import plots

    version = data.version_col
    parts = [
        '<h2 id="labels">Label coverage and arrival</h2>',
        _figure(
            lambda: plots.trend_figure(
                data.rollup, "label_coverage", version, (version,), data.grain
            ),
            "Label coverage over time",
            "Share of each period's rows whose label has arrived. Recent periods are low while "
            "labels are on their way; their labelled metrics rest on fewer rows.",
            lambda ax: ax.set_ylim(0, 1.05),
        ),
    ]
    if data.labels is not None and data.labels.num_rows:
        parts.append(
            _figure(
                lambda: plots.trend_figure(
                    data.labels, "p90_delay_days", version, (version,), data.grain
                ),
                "Label arrival delay over time",
                "90th percentile of the days from prediction to label, per period (labels "
                "query); the newest periods look fast only because their slow labels have "
                "not arrived yet.",
                lambda ax: ax.set_ylim(0, None),
            )
        )
    else:
        parts.append(
            "<p>No arrival delay: the labels query needs a separate label table with a "
            "label time column (label_time_col).</p>"
        )
    return "\n".join(parts)


def _figure(draw, title: str, caption: str, adjust=None) -> str:
    """The picture ``draw()`` makes (its axes passed to ``adjust``), inline with its caption;
    a short note instead when there is nothing to draw (e.g. no labels for a labelled
    measure)."""
    from dbmetrics import plots

    try:
        figure = draw()
    except DbmetricsError as e:
        return f"<p>No picture of {_e(title.lower())}: {_e(str(e))}.</p>"
    if adjust is not None:
        adjust(figure.axes[0])
    png = base64.b64encode(plots.png_bytes(figure)).decode("ascii")
    return (
        f'<figure><img alt="{_e(title)}" src="data:image/png;base64,{png}">'
        f"<figcaption><strong>{_e(title)}.</strong> {_e(caption)}</figcaption></figure>"
    )


def _rows(table: pa.Table, keep=None) -> list[dict]:
    return [r for r in table.to_pylist() if keep is None or keep(r)]


def _tr(values, cls: str = "") -> str:
    cells = []
    for v in values:
        numeric = isinstance(v, (int, float)) and not isinstance(v, bool)
        cells.append(
            f'<td class="num">{_e(_text(v))}</td>' if numeric else f"<td>{_e(_text(v))}</td>"
        )
    attr = f' class="{cls}"' if cls else ""
    return f"<tr{attr}>{''.join(cells)}</tr>"


def _table(head, body) -> str:
    header = "".join(f"<th>{_e(str(h))}</th>" for h in head)
    return f"<table><thead><tr>{header}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _text(value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return number(value)
    if isinstance(value, dt.date) and not isinstance(value, dt.datetime):
        return value.isoformat()
    return str(value)


def _e(text: str) -> str:
    return html.escape(safe(str(text)), quote=True)
