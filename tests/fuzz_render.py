"""Fuzz target for the template renderer: any parameter text is either refused with a
one-line DbmetricsError or rendered so that the text never appears in the SQL outside quoted
identifiers and string literals (it is bound, or quoted as an identifier). Anything else
(another exception, pasted text) is a bug.

Run it:
    python tests/fuzz_render.py                 # atheris if installed
    python tests/fuzz_render.py -atheris_runs=100000
    python tests/fuzz_render.py --hypothesis 5000   # without atheris
tests/test_bad_inputs.py runs `fuzz_one` under hypothesis in the normal test run.
"""

import datetime as dt
import re
import sys
import tempfile
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

if __name__ == "__main__":  # run as a script from a checkout
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import dbmetrics
from dbmetrics.errors import DbmetricsError
from dbmetrics.queries import list_queries, render_query

QUOTED = re.compile(r'"(?:[^"]|"")*"|\'(?:[^\']|\'\')*\'|--[^\n]*')  # and comments
_state = {}


def setup():
    """A connection and a one-row log, made once per process."""
    if not _state:
        folder = Path(tempfile.mkdtemp(prefix="fuzz_render_"))
        logs = folder / "logs.parquet"
        pq.write_table(
            pa.table(
                {
                    "ts": pa.array([dt.datetime(2026, 1, 5)], pa.timestamp("us")),
                    "model_version": ["v1"],
                    "region": ["a"],
                    "id": ["p0"],
                    "logits": pa.array([[0.0, 1.0]], pa.list_(pa.float32())),
                    "label": [1],
                }
            ),
            logs,
        )
        (folder / "biz.csv").write_text("region,tier\na,gold\n")
        queries = [(q.name, p.name) for q in list_queries() for p in q.params]
        _state.update(
            con=dbmetrics.connect(), logs=str(logs), biz=str(folder / "biz.csv"), targets=queries
        )
    return _state


def shape(sql: str) -> str:
    return QUOTED.sub("?", sql)


def base(name: str) -> dict:
    s = setup()
    params = {"logs": s["logs"]}
    if name == "segments":
        params.update(segment_cols="region", business=s["biz"])
    return params


def fuzz_one(data: bytes) -> None:
    """One input: its first byte picks (query, parameter), the rest is the parameter text."""
    s = setup()
    if not data:
        return
    query, param = s["targets"][data[0] % len(s["targets"])]
    text = data[1:].decode("utf-8", errors="replace")
    params = {**base(query), param: text}
    try:
        sql, bound = render_query(s["con"], query, params)
    except DbmetricsError as exc:
        assert str(exc).strip()  # the CLI prints it on one line (it may quote the text)
        return
    plain = shape(render_query(s["con"], query, base(query))[0])
    word = text.strip()
    if len(word) >= 3 and word not in plain:  # the text never reaches SQL outside quotes
        assert word not in shape(sql), (query, param, text)


def main(argv: list) -> None:
    try:
        import atheris
    except ImportError:
        atheris = None
    if atheris is not None and "--hypothesis" not in argv:
        atheris.Setup(argv, fuzz_one)
        atheris.Fuzz()
        return
    from hypothesis import given, settings
    from hypothesis import strategies as st

    runs = int(argv[argv.index("--hypothesis") + 1]) if "--hypothesis" in argv else 2000
    given(st.binary(max_size=200))(settings(max_examples=runs, deadline=None)(fuzz_one))()
    print(f"fuzz_render: {runs} inputs, no failure")


if __name__ == "__main__":
    main(sys.argv)
