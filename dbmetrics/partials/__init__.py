"""A store of additive partial states, one Parquet file per day and state kind, so that
rollups never rescan what they have already summarised.

    update(con, params, store, ...)      recompute the days whose rows or labels changed, add
                                         new days, publish in one step (update.py)
    Update                               the same in two steps (compute, then publish)
    Publisher                            stage day files and publish them, for any writer
    describe(store)                      what the store holds, stale days, missing files
    store_fragments(texts, given)        the state SQL the saved queries use when a query is
                                         given `partials=STORE`
    STATE_KINDS                          the kinds of state a store keeps (kinds.py)
"""

from .fragments import store_fragments
from .kinds import STATE_KINDS, StateKind
from .store import Publisher, Store, describe
from .update import Update, update

__all__ = [
    "STATE_KINDS",
    "Publisher",
    "StateKind",
    "Store",
    "Update",
    "describe",
    "store_fragments",
    "update",
]
