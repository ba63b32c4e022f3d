"""Do all routes give the same numbers? Counts must be equal; floats within a relative
tolerance (every route computes in float64 from the same float32 logits, so they differ
only by summation order: 1e-9 is generous)."""

import math

from bench.methods import KEYS, METRICS

RTOL, ATOL = 1e-9, 1e-12
COUNTS = ("rows", "labelled_rows")


def close(a, b, rtol=RTOL) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return math.isclose(a, b, rel_tol=rtol, abs_tol=ATOL)


def rollup_mismatches(ref: list, other: list, limit: int = 5) -> list:
    """Human-readable differences between two rollups (empty list = they agree)."""
    index = {tuple(r[k] for k in KEYS): r for r in ref}
    seen = {tuple(r[k] for k in KEYS): r for r in other}
    out = [f"group {k} missing" for k in sorted(set(index) - set(seen))]
    out += [f"extra group {k}" for k in sorted(set(seen) - set(index))]
    for key in sorted(set(index) & set(seen)):
        a, b = index[key], seen[key]
        for m in METRICS:
            if not (a[m] == b[m] if m in COUNTS else close(a[m], b[m])):
                out.append(f"{m} at {key}: {a[m]!r} vs {b[m]!r}")
    return out[:limit] + ([f"... {len(out) - limit} more"] if len(out) > limit else [])


def max_rel_diff(ref: list, other: list) -> float:
    index = {tuple(r[k] for k in KEYS): r for r in ref}
    worst = 0.0
    for r in other:
        a = index.get(tuple(r[k] for k in KEYS))
        for m in METRICS:
            if a and a[m] and r[m] is not None:
                worst = max(worst, abs(r[m] - a[m]) / abs(a[m]))
    return worst


def overall_cross_entropy(rollup: list) -> float:
    """The mean cross-entropy over all labelled rows, from a rollup's group means."""
    total = sum(r["labelled_rows"] for r in rollup)
    return math.fsum(r["cross_entropy"] * r["labelled_rows"] for r in rollup) / total
