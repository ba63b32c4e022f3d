"""A store of additive partial states, one Parquet file per day, so that rollups never
rescan what they have already summarised.

    update(con, params, store, ...)      compute new (and recently relabelled) days, replace them
    describe(store)                      what the store holds
    store_fragments(texts)               the {{state}} / {{class_state}} SQL the saved queries use
                                         when a query is given `partials=STORE`
"""

from .fragments import store_fragments
from .store import Store, describe
from .update import update

__all__ = ["Store", "describe", "store_fragments", "update"]
