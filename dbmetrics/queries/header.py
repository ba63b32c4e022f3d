"""Parse the comment header of a saved query into a QueryInfo.

A saved query is one .sql file that opens with a header of `--` lines:

    -- name: rollup
    -- summary: One row per period x version x segment: volume, loss, accuracy.
    -- param logs (source, required): the prediction log
    -- param grain (choice(day|week|month), default week): period length
    -- param classes (text): optional: no default, unset unless given
    -- output rows: rows in the group
    -- note: free text (conventions, formulas); several allowed
    -- show: period, version_col, segment_cols, rows (the key columns a terminal table shows
    --     first, most important first; a column(s) parameter stands for the columns it names)
    -- example: dbmetrics run rollup --set logs=logs/
    --     (a line indented by three or more spaces continues the entry above)
    -- include: column_roles
    --     (the column-role parameters of role_params.py, in their place; a parameter the
    --     query declares itself replaces the included one of that name)

The body after the header is SQL with `$name` for bound values and `{{name}}` for rendered
fragments: a declared source/column parameter (quoted), a column-role fragment (state_sql.py),
or `{{query:NAME}}`, another saved query's body rendered with the same parameters. Every
`$name` and parameter placeholder must be declared in the header.
"""

import functools
import re
from dataclasses import dataclass, field
from pathlib import Path

from dbmetrics.errors import DbmetricsError

from . import role_params
from .role_params import REQUIRED_ROLES

COLUMN_MAP = role_params.COLUMN_ROLES  # the column-role parameters' names

TYPES = ("source", "column", "columns", "choice", "date", "number", "integer", "text")
FRAGMENTS = (
    "state",
    "class_state",
    "class_bin_state",
    "confusion_state",
    "binary_state",
    "predictions",
    "rows_by_id",
    "segments",
    "segment_match",
)  # see state_sql.fragments (rows_by_id: pairs.py)

PARAM_NAME = re.compile(r"param\s+([a-z_][a-z0-9_]*)\s*\(")
MEANING = re.compile(r"\s*:\s*(.+)")
KEYED = re.compile(
    r"(name|summary|example|note|show|include|output\s+[A-Za-z_][A-Za-z0-9_]*)\s*:\s*(.*)"
)
TYPE = re.compile(r"([a-z]+)(?:\((.*)\))?")
CHOICES = re.compile(r"[a-z0-9_]+(?:\|[a-z0-9_]+)*")
SOURCES = re.compile(r"[a-z_][a-z0-9_]*(?:\s*,\s*[a-z_][a-z0-9_]*)*")
RANGE = re.compile(r"(>?-?[0-9.]+)?\.\.(<?-?[0-9.]+)?")  # `>0..<1`: both ends excluded
NAME = re.compile(r"[a-z][a-z0-9_]*")
SPEC = re.compile(r"(\w+\([^()]*\)|[^,]*)\s*(?:,(.*))?")
BOUND = re.compile(r"\$([A-Za-z_][A-Za-z0-9_]*)")
# `{{ name }}` -> name. The lookahead checks a closing `}}` first and the name is words split by
# single whitespace runs, so no span is tried twice: linear even on long whitespace runs.
PLACEHOLDER = re.compile(r"\{\{(?=[^{}]*\}\})\s*((?:[^{}\s]+(?:\s+[^{}\s]+)*)?)\s*\}\}")
LITERALS = re.compile(r'"(?:[^"]|"")*"|\'(?:[^\']|\'\')*\'|--[^\n]*')  # and comments


def bound_values(sql: str, values: dict) -> dict:
    """The values of exactly the `$names` the SQL uses; a `$` inside a quoted identifier, a
    string or a comment is not a parameter."""
    return {n: values[n] for n in dict.fromkeys(BOUND.findall(LITERALS.sub("", sql)))}


@dataclass(frozen=True)
class Param:
    """One declared parameter. `type` is the header text, e.g. "choice(day|week|month)".

    kind: the base type; choices: for choice; sources: the source params a column(s) type
    is checked against (default: logs); low/high: bounds of integer/number, inclusive
    unless low_open/high_open (written `>LOW..` and `..<HIGH`);
    default: text as written, None when unset.
    """

    name: str
    type: str
    kind: str
    help: str
    default: str | None = None
    required: bool = False
    choices: tuple = ()
    sources: tuple = ()
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False


@dataclass(frozen=True)
class QueryInfo:
    name: str
    summary: str
    path: Path
    params: tuple
    example: str
    origin: str  # 'built-in' or 'user'
    outputs: tuple = ()  # (column, meaning) pairs
    notes: tuple = ()
    body: str = field(default="", repr=False)
    show: tuple = ()  # key columns for terminal tables: output names or column(s) parameters

    def param(self, name: str) -> Param:
        return next(p for p in self.params if p.name == name)


def parse_query(text: str, path: Path, origin: str) -> QueryInfo:
    """Split `text` into header and body, check both, and describe the query."""
    lines = text.splitlines()
    header = []
    for line in lines:
        if not line.startswith("--"):
            break
        header.append(line)
    body = "\n".join(lines[len(header) :]).strip()
    entries = _header_entries(header, path)
    fields, params, outputs, notes = {}, [], [], []
    for key, value in entries:
        if key.startswith("param "):
            params.append(parse_param(key + value, path))
        elif key == "include":
            if value != role_params.INCLUDE:
                raise DbmetricsError(
                    f"{path}: `-- include: {value}` names no parameter set; "
                    f"the one there is: {role_params.INCLUDE}"
                )
            params.append(None)  # the column roles go here
        elif key.startswith("output"):
            outputs.append((key.split()[1], value))
        elif key == "note":
            notes.append(value)
        elif key in fields:
            raise DbmetricsError(f"{path}: header repeats `{key}:`; give it once")
        else:
            fields[key] = value
    for key in ("name", "summary", "example"):
        if not fields.get(key):
            raise DbmetricsError(
                f"{path}: header lacks `-- {key}: ...`; every saved query "
                "needs name, summary and example lines"
            )
    name = fields["name"]
    if not NAME.fullmatch(name) or name != path.stem:
        raise DbmetricsError(
            f"{path}: header name `{name}` must be lower-case letters, digits "
            f"and _ and match the file name `{path.stem}`"
        )
    params = _with_included(params)
    names = [p.name for p in params]
    if len(set(names)) != len(names):
        raise DbmetricsError(f"{path}: a parameter is declared twice: {', '.join(names)}")
    info = QueryInfo(
        name,
        fields["summary"],
        path,
        tuple(params),
        fields["example"],
        origin,
        tuple(outputs),
        tuple(notes),
        body,
        tuple(c.strip() for c in fields.get("show", "").split(",") if c.strip()),
    )
    _check_body(info)
    _check_show(info)
    return info


@functools.cache
def column_role_params() -> tuple:
    """The column-role parameters as declared once in role_params.HEADER."""
    return tuple(parse_param(text, Path(role_params.__file__)) for text in role_params.HEADER)


def column_roles_info(name: str, summary: str) -> QueryInfo:
    """The column-role parameters alone, described like a saved query's (for `with_defaults`
    and `convert`): what a command that takes only the column roles reads."""
    return QueryInfo(
        name, summary, Path(role_params.__file__), column_role_params(), "", "built-in"
    )


def _with_included(params: list) -> list:
    """`params` with each include marker (None) replaced by the column-role parameters the
    query does not declare itself."""
    own = {p.name for p in params if p is not None}
    out = []
    for p in params:
        out.extend([q for q in column_role_params() if q.name not in own] if p is None else [p])
    return out


def _header_entries(header: list, path: Path) -> list:
    """(key, value) per header entry; indented lines continue the entry above."""
    entries = []  # (key, [value, continuation, ...]): joined once at the end
    for line in header:
        text = line[2:]
        if not text.strip():
            continue
        if text.startswith("   ") and entries:
            entries[-1][1].append(text.strip())
            continue
        text = text.strip()
        if text.startswith("param "):
            entries.append((text, [""]))
            continue
        match = KEYED.fullmatch(text)
        if not match:
            shown = line if len(line) <= 200 else f"{line[:200]}..."
            raise DbmetricsError(
                f"{path}: header line `{shown}` is not one of name:, summary:, "
                "param NAME (TYPE...): , output NAME:, note:, show:, example:"
            )
        entries.append((" ".join(match.group(1).split()), [match.group(2).strip()]))
    return [(key, " ".join(parts)) for key, parts in entries]


def parse_param(text: str, path: Path) -> Param:
    """`NAME (TYPE[, default VALUE | required]): meaning` -> Param."""
    parts = _split_param(text.strip())
    if parts is None:
        shown = text if len(text) <= 200 else f"{text[:200]}..."
        raise DbmetricsError(
            f"{path}: cannot read `-- {shown}`; expected "
            "`-- param NAME (TYPE[, default VALUE | required]): meaning`"
        )
    name, spec, meaning = parts
    type_text, rest = (part.strip() for part in SPEC.fullmatch(spec.strip()).groups(""))
    kind, arg = TYPE.fullmatch(type_text).groups() if TYPE.fullmatch(type_text) else (None, None)
    parsers = {
        "choice": CHOICES,
        "column": SOURCES,
        "columns": SOURCES,
        "integer": RANGE,
        "number": RANGE,
    }
    if kind not in TYPES or (
        arg is not None and not (kind in parsers and parsers[kind].fullmatch(arg))
    ):
        raise DbmetricsError(
            f"{path}: parameter `{name}` has unknown type `{type_text}`; types "
            f"are {', '.join(TYPES)}, with choice(a|b), column(source, ...), "
            "columns(source, ...), integer(lo..hi), number(lo..hi) (>lo, <hi: ends excluded)"
        )
    if kind == "choice" and arg is None:
        raise DbmetricsError(
            f"{path}: parameter `{name}`: choice needs its options, e.g. choice(day|week|month)"
        )
    default, required = None, False
    if rest == "required":
        required = True
    elif rest.startswith("default "):
        default = rest[len("default ") :].strip()
    elif rest:
        raise DbmetricsError(
            f"{path}: parameter `{name}`: `{rest}` should be `default VALUE` or `required`"
        )
    choices = tuple(arg.split("|")) if kind == "choice" else ()
    if kind == "choice" and default is not None and default not in choices:
        raise DbmetricsError(
            f"{path}: parameter `{name}` defaults to `{default}`, not one of {'|'.join(choices)}"
        )
    sources = (
        tuple(s.strip() for s in arg.split(",")) if arg and kind in ("column", "columns") else ()
    )
    low, high = arg.split("..") if arg and kind in ("integer", "number") else ("", "")
    return Param(
        name,
        type_text,
        kind,
        meaning.strip(),
        default,
        required,
        choices,
        sources,
        float(low.lstrip(">")) if low else None,
        float(high.lstrip("<")) if high else None,
        low.startswith(">"),
        high.startswith("<"),
    )


def _check_show(info: QueryInfo) -> None:
    """Every `-- show:` name is a declared output column or a column(s) parameter."""
    known = {c for c, _ in info.outputs} | {
        p.name for p in info.params if p.kind in ("column", "columns")
    }
    unknown = [c for c in info.show if c not in known]
    if unknown:
        raise DbmetricsError(
            f"{info.path}: `-- show:` names {', '.join(unknown)}, which is neither an "
            "`-- output` column nor a column parameter"
        )


def _split_param(text: str) -> tuple | None:
    """(name, spec, meaning) of `param NAME (SPEC): meaning`, where SPEC holds at most one
    parenthesised group; None if `text` is not so shaped. One pass over the text (a regular
    expression with two starred spans around the group backtracks quadratically)."""
    match = PARAM_NAME.match(text)
    if not match:
        return None
    depth, groups, i = 1, 0, match.end()
    while depth and i < len(text):
        char = text[i]
        if char == "(":
            depth, groups = depth + 1, groups + 1
            if depth > 2 or groups > 1:
                return None
        elif char == ")":
            depth -= 1
        i += 1
    meaning = MEANING.fullmatch(text, i)
    if depth or not meaning:
        return None
    return match.group(1), text[match.end() : i - 1], meaning.group(1)


def _check_body(info: QueryInfo) -> None:
    """Every `$name` and `{{name}}` in the body is declared; fragments need the column roles."""
    declared = {p.name: p for p in info.params}
    for name in BOUND.findall(info.body):
        if name not in declared:
            raise DbmetricsError(
                f"{info.path}: the SQL uses ${name} but the header declares no "
                f"parameter `{name}`; add `-- param {name} (TYPE...): meaning`"
            )
    for name in PLACEHOLDER.findall(info.body):
        if name.startswith("query:") and NAME.fullmatch(name[len("query:") :]):
            continue  # another saved query, rendered with these parameters (checked then)
        if name in FRAGMENTS:
            missing = [p for p in REQUIRED_ROLES if p not in declared]
            if missing:
                raise DbmetricsError(
                    f"{info.path}: {{{{{name}}}}} needs the column-role parameters "
                    f"declared; missing: {', '.join(missing)}"
                )
        elif name not in declared or declared[name].kind not in ("source", "column", "columns"):
            raise DbmetricsError(
                f"{info.path}: placeholder {{{{{name}}}}} is neither a declared source/column "
                f"parameter nor one of the fragments {', '.join(FRAGMENTS)}"
            )
    for p in info.params:
        unknown = [s for s in p.sources if s not in declared or declared[s].kind != "source"]
        if unknown:
            raise DbmetricsError(
                f"{info.path}: parameter `{p.name}` checks columns against "
                f"`{', '.join(unknown)}`, which is not a declared source parameter"
            )
