"""STATE sums in one compiled pass per batch (numba, the optional `jit` extra).

The same per-row formulas and codes as row_stats.logit_row_stats / prob_row_stats, fused
with the summing: each row is read once from the Arrow buffers (its own length, no
padding), its statistics are computed in float64 and added straight into the accumulators
of its group x calibration bin. Nothing per row is materialised, so the state costs the
exponentials and little else.

Accumulators, which name STATE's columns after day and bin (state_sql.STATE_COLUMNS):
COUNTS are int64 row counts, SUMS float64 sums added with Neumaier's compensated summation
(the compensation is returned separately and added once at the end). Row categories
(exclusive): missing (NULL or empty list), invalid (NaN or NULL element, +inf logit, all
classes masked; for probabilities any non-finite sum), not a distribution (probabilities:
a negative entry or a sum further than SUM_TOLERANCE from 1); then, among scored rows,
unlabelled, bad label (outside [0, K) of the row), infinite loss (true class has
probability 0), evaluated. Unscored rows go to bin `bins` (STATE's NULL bin).

Logits:        d = z - max z, s = sum exp(d), loss = log s - d_y, confidence = 1/s,
               entropy = log s - sum_{p_j > 0} p_j d_j, p = exp(d) / s.
Probabilities: p = q / sum q, loss = -log p_y, confidence = max p,
               entropy = -sum_{p_j > 0} p_j log p_j.
Both:          Brier = sum_j (p_j - [j = y])^2, predicted = first class of maximum p.
"""

import math
import os

import numpy as np

from .distributions import SUM_TOLERANCE

COUNTS = (
    "rows",
    "labelled_rows",
    "missing_scores",
    "invalid_scores",
    "scored_rows",
    "bad_labels",
    "infinite_loss_rows",
    "evaluated_rows",
    "correct_rows",
)
SUMS = (
    "sum_confidence",
    "sum_entropy",
    "sum_loss",
    "sum_loss_sq",
    "sum_brier",
    "sum_brier_sq",
    "sum_confidence_evaluated",
)
(
    _ROWS,
    _LABELLED,
    _MISSING,
    _INVALID,
    _SCORED,
    _BAD_LABEL,
    _INFINITE,
    _EVALUATED,
    _CORRECT,
) = range(len(COUNTS))
_CONF, _ENTROPY, _LOSS, _LOSS_SQ, _BRIER, _BRIER_SQ, _CONF_EVALUATED = range(len(SUMS))
DISABLE_VARIABLE = "DBMETRICS_JIT"  # set to 0 to use the numpy engine even with numba installed


def available() -> bool:
    """Whether the compiled route can run: numba importable and not turned off."""
    if os.environ.get(DISABLE_VARIABLE, "1") == "0":
        return False
    try:
        import numba  # noqa: F401
    except ImportError:
        return False
    return True


def _compiled():
    """The numba-compiled accumulators (compiled at first use, cached on disk)."""
    from numba import njit

    jit = njit(cache=True, nogil=True)

    @njit(inline="always")
    def add(sums, comp, slot, c, x):
        s = sums[slot, c]
        t = s + x
        if abs(s) >= abs(x):
            comp[slot, c] += (s - t) + x
        else:
            comp[slot, c] += (x - t) + s
        sums[slot, c] = t

    @njit(inline="always")
    def calibration_bin(conf, bins, edges):
        g = int(math.ceil(conf * bins)) - 1
        g = min(max(g, 0), bins - 1)
        if conf <= edges[g] and g > 0:
            g -= 1
        if conf > edges[g + 1] and g < bins - 1:
            g += 1
        return g

    @njit(inline="always")
    def count_unscored(counts, slot, labelled, code):
        counts[slot, _ROWS] += 1
        counts[slot, _LABELLED] += labelled
        counts[slot, code] += 1

    @njit(inline="always")
    def add_scored(counts, sums, comp, slot, labelled, y, k, conf, entropy, loss, brier, pred):
        counts[slot, _ROWS] += 1
        counts[slot, _LABELLED] += labelled
        counts[slot, _SCORED] += 1
        add(sums, comp, slot, _CONF, conf)
        add(sums, comp, slot, _ENTROPY, entropy)
        if not labelled:
            return
        if y < 0 or y >= k:
            counts[slot, _BAD_LABEL] += 1
        elif loss == np.inf:
            counts[slot, _INFINITE] += 1
        else:
            counts[slot, _EVALUATED] += 1
            counts[slot, _CORRECT] += pred == y
            add(sums, comp, slot, _LOSS, loss)
            add(sums, comp, slot, _LOSS_SQ, loss * loss)
            add(sums, comp, slot, _BRIER, brier)
            add(sums, comp, slot, _BRIER_SQ, brier * brier)
            add(sums, comp, slot, _CONF_EVALUATED, conf)

    @jit
    def shifted(offsets, values, present, d):
        """d = z - max z per row into `d` (float64); the row's code: 0 scored, else
        _MISSING or _INVALID (their d is left as -inf, so exp(d) = 0)."""
        code = np.zeros(len(offsets) - 1, np.int64)
        for i in range(len(offsets) - 1):
            a, k = offsets[i], offsets[i + 1] - offsets[i]
            if not present[i] or k == 0:
                code[i] = _MISSING
                d[a : a + k] = -np.inf  # a NULL list may still span values
                continue
            m = np.float64(values[a])
            for j in range(k):
                v = np.float64(values[a + j])
                if v > m or v != v:
                    m = v
                if v != v:
                    break
            if not (-np.inf < m < np.inf):
                code[i] = _INVALID
                d[a : a + k] = -np.inf
                continue
            for j in range(k):
                d[a + j] = np.float64(values[a + j]) - m
        return code

    @jit
    def logits(offsets, d, e, code, y, y_present, group, bins, counts, sums, comp, first):
        edges = np.linspace(0.0, 1.0, bins + 1)
        for i in range(len(offsets) - 1):
            a, k = offsets[i], offsets[i + 1] - offsets[i]
            g = group[i]
            if first[g] < 0:
                first[g] = i
            labelled = y_present[i]
            if code[i] != 0:
                count_unscored(counts, g * (bins + 1) + bins, labelled, code[i])
                continue
            s = 0.0
            pred = -1
            for j in range(a, a + k):
                s += e[j]
                if pred < 0 and d[j] == 0.0:
                    pred = j - a
            log_s = math.log(s)
            label = y[i] if labelled else -1
            pd = 0.0
            brier = 0.0
            for j in range(k):
                p = e[a + j] / s
                if p > 0.0:
                    pd += p * d[a + j]
                t = p - 1.0 if j == label else p
                brier += t * t
            loss = log_s - d[a + label] if 0 <= label < k else np.inf
            conf = 1.0 / s
            slot = g * (bins + 1) + calibration_bin(conf, bins, edges)
            add_scored(
                counts, sums, comp, slot, labelled, y[i], k, conf, log_s - pd, loss, brier, pred
            )

    @jit
    def probabilities(
        offsets, values, present, y, y_present, group, bins, tolerance, counts, sums, comp, first
    ):
        edges = np.linspace(0.0, 1.0, bins + 1)
        for i in range(len(offsets) - 1):
            a, k = offsets[i], offsets[i + 1] - offsets[i]
            g = group[i]
            if first[g] < 0:
                first[g] = i
            labelled = y_present[i]
            unscored = g * (bins + 1) + bins
            if not present[i] or k == 0:
                count_unscored(counts, unscored, labelled, _MISSING)
                continue
            total = 0.0
            negative = False
            for j in range(k):
                q = np.float64(values[a + j])
                total += q
                negative |= q < 0.0
            if not (-np.inf < total < np.inf):
                count_unscored(counts, unscored, labelled, _INVALID)
                continue
            if negative or abs(total - 1.0) > tolerance:
                count_unscored(counts, unscored, labelled, _INVALID)
                continue
            label = y[i] if labelled else -1
            conf = -1.0
            pred = -1
            entropy = 0.0
            brier = 0.0
            for j in range(k):
                p = np.float64(values[a + j]) / total
                if p > conf:
                    conf = p
                    pred = j
                if p > 0.0:
                    entropy -= p * math.log(p)
                t = p - 1.0 if j == label else p
                brier += t * t
            loss = np.inf
            if 0 <= label < k:
                loss = 0.0 - math.log(np.float64(values[a + label]) / total)
            slot = g * (bins + 1) + calibration_bin(conf, bins, edges)
            add_scored(
                counts, sums, comp, slot, labelled, y[i], k, conf, entropy, loss, brier, pred
            )

    return shifted, logits, probabilities


_KERNELS = None


def accumulate(kind, offsets, values, present, y, y_present, group, groups, bins):
    """STATE sums of one batch: (counts (groups * (bins + 1), len(COUNTS)) int64,
    sums (same rows, len(SUMS)) float64, first row of each group or -1).

    kind: 'logits' or 'probabilities'; offsets (n + 1,) int64 from 0 into values (float32 or
    float64, NULL elements as NaN, len(values) = offsets[-1]); present: the list is not NULL; y, y_present: the label
    as a class index and whether it is given; group: each row's group in [0, groups).
    Row r of the output is group r // (bins + 1), bin r % (bins + 1) (bin == bins: unscored).
    """
    global _KERNELS
    if _KERNELS is None:
        _KERNELS = _compiled()
    slots = groups * (bins + 1)
    counts = np.zeros((slots, len(COUNTS)), np.int64)
    sums = np.zeros((slots, len(SUMS)))
    comp = np.zeros((slots, len(SUMS)))
    first = np.full(groups, -1, np.int64)
    shifted, logits, probabilities = _KERNELS
    if kind == "logits":
        d = np.empty(len(values))
        code = shifted(offsets, values, present, d)
        e = np.exp(d)  # numpy's vectorised exp: the same values as the numpy kernels'
        logits(offsets, d, e, code, y, y_present, group, bins, counts, sums, comp, first)
    else:
        args = (offsets, values, present, y, y_present, group, bins, SUM_TOLERANCE)
        probabilities(*args, counts, sums, comp, first)
    return counts, sums + comp, first
