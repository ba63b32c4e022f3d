"""Bring a store up to date with the logs: recompute exactly the days whose rows or labels
changed (per-day fingerprints, fingerprint.py), add new days, and publish in one step.

    with Update(store, params, ...) as job:   # takes the store lock for the whole update
        job.compute(con)                      # fingerprints, then the states of changed days
        summary = job.publish()               # stage the day files, one manifest swap

What an update never does silently:
- A stored day whose rows are gone from the logs (retention) is kept, with a warning;
  `drop_vanished` follows the logs instead (drops it, or recomputes what is left).
- With `relabel_days` N, a changed day more than N days before the newest new or changed
  day is left as stored: a warning now, and `stale` in the manifest (`partials show`) until
  an update recomputes it.
- Rows dated after tomorrow are stored like any other day, with a warning; they never move
  the relabel window (it is counted from days that changed, not from the newest stored day).
"""

import datetime as dt

import duckdb
import pyarrow as pa
import pyarrow.compute as pc

from dbmetrics.errors import DbmetricsError
from dbmetrics.queries.header import COLUMN_MAP, column_roles_info
from dbmetrics.queries.role_params import COLUMN_ROLES
from dbmetrics.queries.roles import column_roles
from dbmetrics.queries.schema import first_line, open_source
from dbmetrics.queries.state_kinds import KIND_NAMES, compute_kinds
from dbmetrics.queries.state_sql import CLASS_STATE_COLUMNS, INTERNAL, STATE_COLUMNS
from dbmetrics.queries.store_manifest import sort_key
from dbmetrics.queries.values import convert, with_defaults

from .fingerprint import fingerprints, only_days
from .store import Publisher, Store

# The column roles a store records (all but the logs, which may move) and reuses on update.
RECORDED = tuple(role for role in COLUMN_ROLES if role != "logs")
KNOWN = (*COLUMN_MAP, "timezone")
KEY = "dbmetrics_day_key"
STAGED = "dbmetrics_partials_day"


def column_roles_texts(params: dict, recorded: dict | None) -> tuple:
    """(texts, the column-role parameters as a QueryInfo): given ones over the store's
    recorded ones over their defaults (role_params.py); a given one that differs from the
    recorded one is refused."""
    unknown = sorted(set(params) - set(KNOWN))
    if unknown:
        raise DbmetricsError(
            f"partials: no parameter {', '.join(unknown)}; a store takes the "
            f"column roles only: {', '.join(KNOWN)}"
        )
    roles = column_roles_info("partials update", "A store's column roles")
    given = {k: v for k, v in params.items() if v is not None}
    timezone = str(given.pop("timezone", "") or "").strip() or None
    texts = with_defaults(roles, given)
    texts["timezone"] = timezone or "UTC"
    if recorded is not None:
        for key in RECORDED:
            mine = texts[key]
            if key not in recorded:  # a format-1 store did not record the time zone
                continue
            if (key in given or key == "timezone") and recorded[key] != mine:
                raise DbmetricsError(
                    f"partials: the store was built with {key}={recorded[key]!r}, this update "
                    f"gives {key}={mine!r}; use the same column roles or a new store"
                )
            if key not in given and key != "timezone":
                texts[key] = recorded[key]
        if "timezone" in recorded and timezone is None:
            texts["timezone"] = recorded["timezone"]
    if texts["logs"] is None:
        raise DbmetricsError("partials: needs parameter `logs` (the prediction log to summarise)")
    return texts, roles


class Update:
    """One update of a store; see the module docstring."""

    def __init__(
        self,
        store,
        params: dict,
        since: dt.date | None = None,
        relabel_days: int | None = None,
        full: bool = False,
        drop_vanished: bool = False,
        warn=None,
        waiting=None,
        today: dt.date | None = None,
    ):
        self.store = Store(store)
        self.params = params
        self.since, self.relabel_days, self.full = since, relabel_days, full
        self.drop_vanished = drop_vanished
        self.warnings = []
        self._warn = warn
        self._waiting = waiting
        self.today = today or dt.datetime.now(dt.timezone.utc).date()
        self._lock = None
        self.tables = None

    def warn(self, message: str) -> None:
        self.warnings.append(message)
        if self._warn is not None:
            self._warn(message)

    def __enter__(self):
        self._lock = self.store.locked(self._waiting)
        self._lock.__enter__()
        return self

    def __exit__(self, *exc):
        lock, self._lock = self._lock, None
        return lock.__exit__(*exc)

    def compute(self, con: duckdb.DuckDBPyConnection) -> None:
        """Fingerprint the logs, choose the days to recompute, compute their states."""
        self.manifest = self.store.manifest()
        recorded = self.manifest["column_roles"] if self.manifest else None
        params = dict(self.params)
        if self.manifest and params.get("logs") is None:
            params["logs"] = self.manifest["logs"]  # the log this store was last updated from
        texts, declared = column_roles_texts(params, recorded)
        self.texts = texts
        with session_time_zone(con, texts["timezone"]):
            sources = {
                name: open_source(con, name, texts[name])
                for name in ("logs", "labels")
                if texts[name] is not None
            }
            reserved = set(STATE_COLUMNS + CLASS_STATE_COLUMNS + INTERNAL) | {KEY.lower()}
            roles = column_roles(texts, sources, reserved)
            current = _guarded(lambda: fingerprints(con, roles), "reading the logs' days")
            self.plan(current)
            self.tables = {}
            if self.recompute:
                zoned = roles.zoned
                narrowed, bound = only_days(roles, [current[k] for k in self.recompute], zoned)
                values = {"bins": convert(declared.param("bins"), texts["bins"]), **bound}
                values.update(roles.values)  # $classes, $timezone, $unlabelled_value
                if "labels" in sources:
                    values.update(sources["labels"].bound)
                tables = _guarded(
                    lambda: compute_kinds(con, narrowed, values), "computing the state"
                )
                self.tables = _split_by_day(con, tables, set(self.recompute))
                for key in self.recompute:
                    got = pc.sum(self.tables["state"][key].column("rows")).as_py() or 0
                    if got != current[key].fingerprint["rows"]:  # never publish a partial day
                        raise DbmetricsError(
                            f"partials: day {key} has {current[key].fingerprint['rows']} rows "
                            f"in the logs but {got} were summarised (the logs changed during "
                            "the update?); nothing was published: run it again"
                        )

    def plan(self, current: dict) -> None:
        """Sets recompute (keys), kept entries, stale reasons and warnings."""
        stored = (self.manifest or {}).get("days", {})
        missing = set(self.store.missing_files(self.manifest)) if self.manifest else set()
        horizon = epoch_of(self.today) + 1
        new, changed, shrunk = [], [], []
        for key, day in current.items():
            entry = stored.get(key)
            if entry is None:
                new.append(key)
                continue
            old = entry["fingerprint"]
            forced = self.full or (
                self.since is not None
                and day.epoch is not None
                and day.epoch >= epoch_of(self.since)
            )
            broken = set(entry["files"].values()) & missing or set(KIND_NAMES) - set(entry["files"])
            if forced or broken or old is None:
                new.append(key)  # must be recomputed whatever the bound
            elif old != day.fingerprint:
                if day.fingerprint["rows"] < old["rows"] and not self.drop_vanished:
                    shrunk.append(key)
                else:
                    changed.append(key)
        vanished = sorted(set(stored) - set(current), key=sort_key)
        self.stale = {}
        for key in shrunk:
            self.stale[key] = (
                f"the logs now hold {current[key].fingerprint['rows']} of its "
                f"{stored[key]['fingerprint']['rows']} rows; stored state kept"
            )
        if vanished and not self.drop_vanished:
            for key in vanished:
                self.stale[key] = "its rows are gone from the logs; stored state kept"
        if shrunk or (vanished and not self.drop_vanished):
            gone = sorted(shrunk + vanished, key=sort_key)
            self.warn(
                f"partials: {len(gone)} stored day(s) lost rows in the logs "
                f"({summarised(gone)}); their stored state is kept; "
                "pass --drop-vanished to follow the logs"
            )
        if self.relabel_days is not None and changed:
            moved = [current[k].epoch for k in new + changed if current[k].epoch is not None]
            anchor = max([e for e in moved if e <= horizon] or [epoch_of(self.today)])
            first = anchor - self.relabel_days + 1
            left = [k for k in changed if current[k].epoch is not None and current[k].epoch < first]
            changed = [k for k in changed if k not in left]
            for key in left:
                self.stale[key] = (
                    f"labels or rows changed; not recomputed (older than --relabel-days "
                    f"{self.relabel_days})"
                )
            if left:
                self.warn(
                    f"partials: {len(left)} day(s) changed in the logs but lie outside "
                    f"--relabel-days {self.relabel_days} ({summarised(sorted(left, key=sort_key))})"
                    "; they keep their stored state; run without --relabel-days to recompute them"
                )
        future = sorted(k for k, d in current.items() if d.epoch is not None and d.epoch > horizon)
        if future:
            rows = sum(current[k].fingerprint["rows"] for k in future)
            self.warn(
                f"partials: {rows} row(s) are dated after {self.today + dt.timedelta(days=1)} "
                f"(now + 1 day) in time_col `{self.texts['time_col']}`, on "
                f"{summarised(sorted(future, key=sort_key))}; stored as they are"
            )
        self.recompute = sorted(new + changed, key=sort_key)
        self.current = current
        self.kept = {
            k: e
            for k, e in stored.items()
            if k not in self.recompute and (k in current or not self.drop_vanished)
        }

    def publish(self) -> dict:
        """Stage the recomputed days' files and publish them with the kept days."""
        if self.tables is None:
            raise DbmetricsError("partials: publish() before compute()")
        base = self.manifest["generation"] if self.manifest else 0
        days = {
            k: {"files": e["files"], "fingerprint": e["fingerprint"]} for k, e in self.kept.items()
        }
        with Publisher(self.store, base) as pub:
            for key in self.recompute:
                for kind in KIND_NAMES:
                    pub.stage(kind, key, self.tables[kind][key])
                days[key] = {"files": {}, "fingerprint": self.current[key].fingerprint}
            roles = {k: self.texts[k] for k in RECORDED}
            generation = pub.commit(days, roles, logs=self.texts["logs"], stale=self.stale)
        rows = sum(
            int(pc.sum(t.column("rows")).as_py() or 0)
            for t in self.tables.get("state", {}).values()
        )
        return {
            "store": str(self.store.root),
            "generation": generation,
            "days_written": len(self.recompute),
            "days_held": len(days),
            "days_stale": len(self.stale),
            "rows_summarised": rows,
        }


def update(con, params: dict, store, **options) -> dict:
    """Bring `store` up to date with the log named in `params` (see `Update`)."""
    with Update(store, params, **options) as job:
        job.compute(con)
        return job.publish()


def epoch_of(day: dt.date) -> int:
    return (day - dt.date(1970, 1, 1)).days


def summarised(keys: list, shown: int = 5) -> str:
    more = f" and {len(keys) - shown} more" if len(keys) > shown else ""
    return ", ".join(keys[:shown]) + more


def _guarded(call, what: str):
    try:
        return call()
    except duckdb.Error as exc:
        raise DbmetricsError(f"partials: {what} failed: {first_line(exc)}") from exc


class session_time_zone:
    """Cut days in `name` (DuckDB's TimeZone setting) while the update reads the logs."""

    def __init__(self, con, name: str):
        self.con, self.name = con, name

    def __enter__(self):
        known = self.con.execute(
            "SELECT count(*) FROM pg_timezone_names() WHERE name = $tz", {"tz": self.name}
        ).fetchall()[0][0]
        if not known:
            raise DbmetricsError(
                f"timezone: `{self.name}` is not a time zone name (e.g. UTC, Europe/Paris)"
            )
        self.before = self.con.execute("SELECT current_setting('TimeZone')").fetchall()[0][0]
        self.con.execute(f"SET TimeZone = '{self.name}'")  # checked against the list above
        return self

    def __exit__(self, *exc):
        self.con.execute(f"SET TimeZone = '{self.before.replace(chr(39), chr(39) * 2)}'")


def _split_by_day(con, tables: dict, keys: set) -> dict:
    """{kind: {day key: that day's rows}} for the days in `keys` (each kind's table keeps its
    columns; a day with no rows of a kind gets an empty table)."""
    out = {}
    for kind, table in tables.items():
        con.register(STAGED, table)
        try:
            keyed = con.sql(
                f"SELECT coalesce(CAST(day AS VARCHAR), 'null') AS {KEY} FROM {STAGED}"
            ).to_arrow_table()
        finally:
            con.unregister(STAGED)
        column = keyed.column(KEY)
        out[kind] = {key: table.filter(pc.equal(column, pa.scalar(key))) for key in keys}
    return out
