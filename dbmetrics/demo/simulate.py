"""Simulate one day of predictions and the labels that arrive for them."""

from datetime import date, datetime, timedelta

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from . import scenario as sc

LOGS_SCHEMA = pa.schema(
    [
        ("prediction_id", pa.string()),
        ("ts", pa.timestamp("us")),
        ("model_version", pa.string()),
        ("region", pa.string()),
        ("channel", pa.string()),
        ("customer_tier", pa.string()),
        ("logits", pa.list_(pa.float32())),
    ],
    metadata={"dbmetrics.demo": sc.MARK},
)
LABELS_SCHEMA = pa.schema(
    [
        ("prediction_id", pa.string()),
        ("label", pa.int32()),
        ("labelled_at", pa.timestamp("us")),
    ],
    metadata={"dbmetrics.demo": sc.MARK},
)
DAY_US = 86_400_000_000


def _epoch_us(d: date) -> int:
    """Microseconds from 1970-01-01 to midnight of ``d``."""
    return (datetime.combine(d, datetime.min.time()) - datetime(1970, 1, 1)) // timedelta(
        microseconds=1
    )


def _sample_rows(p: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Inverse-CDF draw of one index per row of the (n, m) probability matrix ``p``."""
    return np.minimum((p.cumsum(axis=1) < u[:, None]).sum(axis=1), p.shape[1] - 1)


def _logits_array(logits: np.ndarray, null: np.ndarray) -> pa.ListArray:
    """(n, K) float32 matrix -> FLOAT[] list array, NULL where ``null`` (those rows hold no values)."""
    lengths = np.where(null, 0, logits.shape[1])
    offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int32)
    return pa.ListArray.from_arrays(
        pa.array(offsets), pa.array(logits[~null].ravel()), mask=pa.array(null)
    )


def _names(values, codes: np.ndarray) -> pa.Array:
    """Small integer codes -> the VARCHAR values they index."""
    return pa.DictionaryArray.from_arrays(codes.astype(np.int8), values).cast(pa.string())


def _labels(rng, ids, ts_us, y, as_of_us):
    """Label rows that arrive before the as-of time; a fixed share never arrives."""
    lo, hi = sc.LABEL_DELAY_DAYS
    labelled_at = ts_us + (rng.uniform(lo, hi, len(y)) * DAY_US).astype(np.int64)
    keep = (labelled_at < as_of_us) & (rng.random(len(y)) >= sc.NEVER_LABELLED)
    return pa.table(
        [
            ids.filter(pa.array(keep)),
            pa.array(y[keep], pa.int32()),
            pa.array(labelled_at[keep], pa.timestamp("us")),
        ],
        schema=LABELS_SCHEMA,
    )


def simulate_day(rng: np.random.Generator, day_index: int, day: date, rows: int, as_of: date):
    """Return (logs, labels) Arrow tables for ``rows`` predictions made on ``day``.

    ``day_index`` is 0-based from the start of the log; ``as_of`` is the first day
    whose labels are not yet known. Draws come from ``rng`` in a fixed order.
    """
    week = day_index // 7 + 1
    region = rng.choice(len(sc.REGIONS), rows, p=sc.REGION_P)
    channel = rng.choice(len(sc.CHANNELS), rows, p=sc.CHANNEL_P)
    tier = rng.choice(len(sc.TIERS), rows, p=sc.TIER_P)
    v2 = rng.random(rows) < sc.v2_share(day_index)
    event = (region == sc.EVENT_REGION) & (week >= sc.EVENT_WEEK)

    mix = sc.BASE_MIX * sc.REGION_MULT[region] * sc.CHANNEL_MULT[channel] * sc.TIER_MULT[tier]
    mix[event] *= sc.EVENT_MULT
    y = _sample_rows(mix / mix.sum(axis=1, keepdims=True), rng.random(rows))

    signal = sc.SIGNAL * sc.CHANNEL_SIGNAL[channel] * np.where(event, sc.EVENT_SIGNAL, 1.0)
    carrier = (region == sc.CARRIER_REGION) & (week >= sc.CARRIER_WEEK) & (y == sc.CARRIER_CLASS)
    signal *= np.where(carrier, sc.CARRIER_SIGNAL, 1.0)
    signal *= np.where(v2, sc.V2_SIGNAL_GAIN, 1.0)
    features = rng.standard_normal((rows, sc.K))
    features[np.arange(rows), y] += signal
    scale = sc.SIGNAL * np.where(v2, sc.V2_SIGNAL_GAIN / sc.V2_TEMPERATURE, 1.0)
    prior = np.log(sc.BASE_MIX) * np.where(v2, 1 / sc.V2_TEMPERATURE, 1.0)[:, None]
    logits = (scale[:, None] * features + prior).astype(np.float32)

    dirt = rng.random(rows)
    null = dirt < sc.NULL_LOGITS_RATE
    nan = (dirt >= sc.NULL_LOGITS_RATE) & (dirt < sc.NULL_LOGITS_RATE + sc.NAN_LOGITS_RATE)
    logits[nan, rng.integers(0, sc.K, rows)[nan]] = np.nan

    ts_us = _epoch_us(day) + np.sort(rng.integers(0, DAY_US, rows))
    ids = pc.binary_join_element_wise(
        f"rt-{day:%Y%m%d}-",
        pc.utf8_lpad(pc.cast(pa.array(np.arange(rows)), pa.string()), 6, "0"),
        "",
    )
    logs = pa.table(
        [
            ids,
            pa.array(ts_us, pa.timestamp("us")),
            _names(["v1", "v2"], v2.astype(np.int8)),
            _names(sc.REGIONS, region),
            _names(sc.CHANNELS, channel),
            _names(sc.TIERS, tier),
            _logits_array(logits, null),
        ],
        schema=LOGS_SCHEMA,
    )
    return logs, _labels(rng, ids, ts_us, y, _epoch_us(as_of))
