"""The invented demo scenario: the return-reason classifier of Brindlemoss, a made-up retailer.

Every number below is made up. One row of a ``*_MULT`` table multiplies the base
class mix; the true class of a prediction is drawn from the normalised product.
Weeks are 1-based and start on the Monday given to ``generate``.
"""

import numpy as np

#: The invented retailer (a coined name, not a real shop) and the note every demo file carries.
RETAILER = "Brindlemoss"
MARK = (
    f"Invented demo data: the returns desk of {RETAILER}, a made-up outdoor-gear retailer. "
    "Drawn by dbmetrics.demo from a seeded generator; nothing comes from a real system."
)

CLASSES = ("damaged", "wrong_size", "arrived_late", "not_as_described", "changed_mind", "other")
K = len(CLASSES)

#: Segment values and their traffic shares.
REGIONS = ("north", "south", "east", "west", "alpine")
REGION_P = (0.24, 0.20, 0.20, 0.21, 0.15)
CHANNELS = ("web", "store", "phone")
CHANNEL_P = (0.60, 0.25, 0.15)
TIERS = ("basic", "plus", "pro")
TIER_P = (0.60, 0.30, 0.10)

#: Class mix the model was trained on; its logits carry log(BASE_MIX) as prior.
BASE_MIX = np.array([0.18, 0.30, 0.12, 0.12, 0.20, 0.08])
REGION_MULT = np.array(
    [
        [1.0, 1.0, 1.4, 1.0, 1.0, 1.0],  # north: winter shipping delays
        [1.0, 1.1, 0.9, 1.0, 1.0, 1.0],  # south
        [1.1, 1.0, 1.0, 1.0, 1.0, 1.0],  # east
        [1.0, 1.0, 1.0, 1.0, 1.1, 1.0],  # west
        [1.3, 0.9, 1.0, 1.0, 0.9, 1.0],  # alpine: rough roads, more damage
    ]
)
CHANNEL_MULT = np.array(
    [
        [1.0, 1.0, 1.0, 1.0, 1.0, 1.0],  # web
        [1.0, 1.2, 0.3, 1.0, 1.1, 1.0],  # store: picked up in store, rarely late
        [1.0, 0.9, 1.2, 1.0, 0.9, 1.8],  # phone: more 'other'
    ]
)
TIER_MULT = np.array(
    [
        [1.0, 1.0, 1.0, 1.0, 1.1, 1.0],  # basic
        [1.0, 1.0, 1.0, 1.0, 1.0, 1.0],  # plus
        [1.0, 1.0, 1.0, 1.1, 0.7, 1.0],  # pro: fewer impulse returns
    ]
)

#: Signal strength: a row's feature vector is SIGNAL * onehot(true class) + N(0, 1).
#: v1 logits = SIGNAL * features + log(BASE_MIX), calibrated for web notes.
SIGNAL = 2.0
CHANNEL_SIGNAL = np.array([1.0, 1.0, 0.85])  # phone notes are transcribed, noisier

#: Planted event (b): v2 rolls out from week V2_START_WEEK, its traffic share rising
#: linearly per day to 100% over V2_RAMP_DAYS; it reads the notes slightly better
#: but divides its logits by temperature V2_TEMPERATURE (over-confident).
V2_START_WEEK = 9
V2_RAMP_DAYS = 28
V2_SIGNAL_GAIN = 1.03
V2_TEMPERATURE = 0.5

#: Planted event (a): from week EVENT_WEEK a new product line (ultralight tents) in
#: EVENT_REGION brings many 'not_as_described' and 'damaged' returns whose notes
#: the model reads less well.
EVENT_REGION = REGIONS.index("alpine")
EVENT_WEEK = 14
EVENT_MULT = np.array([1.5, 0.7, 1.0, 7.0, 0.7, 1.0])
EVENT_SIGNAL = 0.9

#: Planted event (c): from week CARRIER_WEEK a new parcel carrier in CARRIER_REGION words
#: its delay notices so that the model no longer recognises CARRIER_CLASS there: those
#: returns keep only CARRIER_SIGNAL of their signal, so that class's recall collapses in
#: that region while the class mix and every other region stay as they were.
CARRIER_REGION = REGIONS.index("east")
CARRIER_CLASS = CLASSES.index("arrived_late")
CARRIER_WEEK = 17
CARRIER_SIGNAL = 0.2

#: Labels arrive uniformly 2-10 days after the prediction; some never do.
LABEL_DELAY_DAYS = (2.0, 10.0)
NEVER_LABELLED = 0.05

#: Deliberately dirty rows: NULL logits, or one NaN among the logits.
NULL_LOGITS_RATE = 4e-4
NAN_LOGITS_RATE = 1e-4


def v2_share(day_index: int) -> float:
    """Share of v2 traffic on the 0-based day ``day_index``: 0 before the rollout, then a linear ramp to 1."""
    ramp_day = day_index - (V2_START_WEEK - 1) * 7 + 1
    return float(np.clip(ramp_day / V2_RAMP_DAYS, 0.0, 1.0))


#: The segment table written to regions.csv (joined to the logs on ``region``).
REGION_TABLE = (
    ("region", "region_name", "warehouse", "margin_pct"),
    ("north", "Northern Lakes", "Duluth", 31.5),
    ("south", "Southern Plains", "Amarillo", 28.0),
    ("east", "Eastern Seaboard", "Allentown", 29.5),
    ("west", "Pacific Coast", "Sacramento", 33.0),
    ("alpine", "High Country", "Boulder", 36.5),
)
