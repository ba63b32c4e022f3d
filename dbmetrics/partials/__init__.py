"""A store of additive partial states, one Parquet file per day and state kind, so that
rollups never rescan what they have already summarised.

    update(con, params, store, ...)      recompute the days whose rows or labels changed, add
                                         new days, publish in one step (update.py)
    Update                               the same in two steps (compute, then publish)
    Publisher                            stage day files and publish them, for any writer
    describe(store)                      what the store holds, stale days, missing files
    store_fragments(texts, given)        the state SQL the saved queries use when a query is
                                         given `partials=STORE` (queries/store_sql.py)
    STATE_KINDS                          the kinds of state a store keeps
                                         (queries/state_kinds.py)

The store's format is the saved queries' layer (queries/state_kinds.py, store_manifest.py,
store_sql.py: what a store holds and how a query reads it); this package writes stores.
"""

from dbmetrics.queries.state_kinds import STATE_KINDS, StateKind
from dbmetrics.queries.store_sql import store_fragments

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
