"""The SQL functions dbmetrics adds to DuckDB: one catalogue, two implementations.

FUNCTIONS is the catalogue: per function its SQL name, argument names, DuckDB types, the
Python UDF body (numpy kernels in kernels/, the reference implementation), a description, an
example call and tags saying what it takes (TAGS). The same functions exist as DuckDB macros
in the SQL pack (sql/macros/dbmetrics_macros.sql, see macros.py). `register` puts one of
the two under each catalogue name: by default the faster one as measured by the benchmark
(bench/README.md), or every function from one implementation.

Adding a function = a kernel in `kernels/`, a row in FUNCTIONS, a macro in the pack, a
reference test; the README's function table is generated from FUNCTIONS (`markdown_table`,
checked by tests/test_docs.py) and the input-rule tests derive their lists from the tags.
"""

import contextlib
from collections.abc import Callable
from dataclasses import dataclass

import duckdb
from duckdb.sqltypes import BIGINT, BOOLEAN, DOUBLE, INTEGER, VARCHAR

from . import macros
from .kernels import distributions as dist
from .kernels import losses, predictions, row_stats, significance, softmax
from .udf_adapters import (
    LOGITS_PAD,
    PROBS_PAD,
    ROW_STATS_TYPE,
    binary_and_label_to_doubles,
    binary_logit_loss,
    binary_logit_matrix,
    binary_prob_matrix,
    confidence_to_bin,
    correct_class,
    doubles_to_doubles,
    lists_and_label_to_doubles,
    lists_to_class,
    lists_to_doubles,
    lists_to_lists,
    row_stats_udf,
    temperature_grid_udf,
    two_lists_to_doubles,
)

SCORES = duckdb.list_type(DOUBLE)
ROW_STATS = duckdb.struct_type(
    {
        f.name: {"int8": "TINYINT", "int32": INTEGER, "double": DOUBLE, "bool": BOOLEAN}[
            str(f.type)
        ]
        for f in ROW_STATS_TYPE
    }
)
TAGS = {
    "logits": "takes a list of logits (a -inf logit is a masked class; +inf or all masked: NULL)",
    "probs": "takes a list of probabilities (checked: >= 0, sum within "
    f"{dist.SUM_TOLERANCE} of 1; renormalised)",
    "label": "takes a 0-based class index; outside [0, K) is an error naming the value",
    "two_lists": "takes two lists with one entry per class (lengths differ: an error)",
    "binary": "takes one score of class 1 and a 0/1 label (else an error)",
    "confidence": "takes a confidence in [0, 1] (else NULL)",
    "grid": "returns one value per temperature",
    "row_stats": "returns the row-statistics struct the saved queries sum up",
    "statistic": "takes a test statistic (NaN: NULL)",
}
IMPLEMENTATIONS = ("fastest", "macros", "udf")


@dataclass(frozen=True)
class SqlFunction:
    name: str
    args: tuple  # argument names, as the docs show them
    params: tuple  # DuckDB types of the Python UDF's arguments
    returns: object
    body: Callable  # the Python UDF (Arrow in, Arrow out) over the numpy kernels
    description: str
    example: str  # a SQL call on literals
    takes: tuple  # keys of TAGS

    @property
    def signature(self) -> str:
        return f"{self.name}({', '.join(self.args)})"


def probs(kernel):
    """Apply a kernel to checked, renormalised probabilities."""
    return lambda p, *rest: kernel(dist.as_distribution(p), *rest)


def _of_softmax(kernel):
    """Apply a kernel to the softmax probabilities of logits."""
    return lambda z, *rest: kernel(softmax.softmax(z), *rest)


FUNCTIONS = (
    SqlFunction(
        "log_softmax",
        ("logits",),
        (SCORES,),
        SCORES,
        lists_to_lists(softmax.log_softmax, LOGITS_PAD),
        "`z - max(z) - log(sum(exp(z - max(z))))`; a -inf logit is a masked class",
        "log_softmax([1.0, 2.0, 3.0])",
        ("logits",),
    ),
    SqlFunction(
        "softmax",
        ("logits",),
        (SCORES,),
        SCORES,
        lists_to_lists(softmax.softmax, LOGITS_PAD),
        "`exp(log_softmax(z))`",
        "softmax([1.0, 2.0, 3.0])",
        ("logits",),
    ),
    SqlFunction(
        "logsumexp",
        ("logits",),
        (SCORES,),
        DOUBLE,
        lists_to_doubles(softmax.logsumexp, LOGITS_PAD),
        "`max(z) + log(sum(exp(z - max(z))))`",
        "logsumexp([1.0, 2.0, 3.0])",
        ("logits",),
    ),
    SqlFunction(
        "as_distribution",
        ("probs",),
        (SCORES,),
        SCORES,
        lists_to_lists(dist.as_distribution, PROBS_PAD),
        f"the probabilities checked (>= 0, sum within {dist.SUM_TOLERANCE} of 1) and renormalised "
        "to sum 1; else NULL",
        "as_distribution([0.2, 0.3, 0.4999])",
        ("probs",),
    ),
    SqlFunction(
        "cross_entropy",
        (
            "logits",
            "label",
        ),
        (SCORES, BIGINT),
        DOUBLE,
        lists_and_label_to_doubles("cross_entropy", losses.cross_entropy_logits, LOGITS_PAD),
        "`-log softmax(z)[label]`",
        "cross_entropy([1.0, 2.0, 3.0], 2)",
        (
            "logits",
            "label",
        ),
    ),
    SqlFunction(
        "cross_entropy_probs",
        (
            "probs",
            "label",
        ),
        (SCORES, BIGINT),
        DOUBLE,
        lists_and_label_to_doubles("cross_entropy_probs", losses.cross_entropy_probs, PROBS_PAD),
        "`-log p[label]`; +inf when that probability is 0",
        "cross_entropy_probs([0.2, 0.3, 0.5], 2)",
        (
            "probs",
            "label",
        ),
    ),
    SqlFunction(
        "soft_cross_entropy",
        (
            "logits",
            "target",
        ),
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "soft_cross_entropy", losses.soft_cross_entropy_logits, LOGITS_PAD, "the target"
        ),
        "`-sum_j t_j log softmax(z)_j`, target a distribution (e.g. annotator votes)",
        "soft_cross_entropy([1.0, 2.0, 3.0], [0.0, 0.25, 0.75])",
        (
            "logits",
            "two_lists",
        ),
    ),
    SqlFunction(
        "soft_cross_entropy_probs",
        (
            "probs",
            "target",
        ),
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "soft_cross_entropy_probs", losses.soft_cross_entropy_probs, PROBS_PAD, "the target"
        ),
        "`-sum_j t_j log p_j`",
        "soft_cross_entropy_probs([0.2, 0.3, 0.5], [0.0, 0.25, 0.75])",
        (
            "probs",
            "two_lists",
        ),
    ),
    SqlFunction(
        "binary_cross_entropy",
        (
            "logit",
            "label",
        ),
        (DOUBLE, BIGINT),
        DOUBLE,
        binary_and_label_to_doubles("binary_cross_entropy", binary_logit_matrix, binary_logit_loss),
        "log-loss of one log-odds score (logits `[0, s]`) against 0/1",
        "binary_cross_entropy(1.5, 1)",
        (
            "binary",
            "logits",
        ),
    ),
    SqlFunction(
        "binary_cross_entropy_prob",
        (
            "p",
            "label",
        ),
        (DOUBLE, BIGINT),
        DOUBLE,
        binary_and_label_to_doubles(
            "binary_cross_entropy_prob", binary_prob_matrix, losses.cross_entropy_probs
        ),
        "log-loss of one probability of class 1 (`[1 - p, p]`) against 0/1",
        "binary_cross_entropy_prob(0.8, 1)",
        (
            "binary",
            "probs",
        ),
    ),
    SqlFunction(
        "kl_divergence",
        (
            "p",
            "q",
        ),
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "kl_divergence",
            lambda p, q: dist.kl_divergence(dist.as_distribution(p), dist.as_distribution(q)),
            PROBS_PAD,
            "q",
        ),
        "`sum p log(p/q)`; +inf where q = 0 < p",
        "kl_divergence([0.36, 0.48, 0.16], [0.3333, 0.3333, 0.3334])",
        (
            "probs",
            "two_lists",
        ),
    ),
    SqlFunction(
        "js_divergence",
        (
            "p",
            "q",
        ),
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "js_divergence",
            lambda p, q: dist.js_divergence(dist.as_distribution(p), dist.as_distribution(q)),
            PROBS_PAD,
            "q",
        ),
        "`KL(p‖m)/2 + KL(q‖m)/2`, `m = (p+q)/2`, within [0, ln 2]",
        "js_divergence([0.36, 0.48, 0.16], [0.3333, 0.3333, 0.3334])",
        (
            "probs",
            "two_lists",
        ),
    ),
    SqlFunction(
        "population_stability_index",
        (
            "actual",
            "expected",
        ),
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "population_stability_index",
            lambda a, e: dist.population_stability_index(dist.normalised(a), dist.normalised(e)),
            PROBS_PAD,
            "expected",
        ),
        "`sum (a-e) log(a/e)` over normalised counts; +inf if a bin is empty in one only",
        "population_stability_index([120, 300, 80], [100, 310, 90])",
        (
            "probs",
            "two_lists",
        ),
    ),
    SqlFunction(
        "shannon_entropy",
        ("p",),
        (SCORES,),
        DOUBLE,
        lists_to_doubles(probs(dist.entropy), PROBS_PAD),
        "`-sum p log p` (0 log 0 = 0)",
        "shannon_entropy([0.36, 0.48, 0.16])",
        ("probs",),
    ),
    SqlFunction(
        "softmax_entropy",
        ("logits",),
        (SCORES,),
        DOUBLE,
        lists_to_doubles(_of_softmax(dist.entropy), LOGITS_PAD),
        "entropy of `softmax(z)`",
        "softmax_entropy([1.0, 2.0, 3.0])",
        ("logits",),
    ),
    SqlFunction(
        "predicted_class",
        ("scores",),
        (SCORES,),
        INTEGER,
        lists_to_class(predictions.predicted_class, LOGITS_PAD),
        "0-based index of the first maximum",
        "predicted_class([0.1, 2.5, 2.5])",
        (
            "logits",
            "probs",
        ),
    ),
    SqlFunction(
        "confidence",
        ("logits",),
        (SCORES,),
        DOUBLE,
        lists_to_doubles(_of_softmax(predictions.confidence), LOGITS_PAD),
        "largest softmax probability",
        "confidence([1.0, 2.0, 3.0])",
        ("logits",),
    ),
    SqlFunction(
        "confidence_probs",
        ("probs",),
        (SCORES,),
        DOUBLE,
        lists_to_doubles(probs(predictions.confidence), PROBS_PAD),
        "largest probability",
        "confidence_probs([0.2, 0.3, 0.5])",
        ("probs",),
    ),
    SqlFunction(
        "margin",
        ("logits",),
        (SCORES,),
        DOUBLE,
        lists_to_doubles(_of_softmax(predictions.margin), LOGITS_PAD),
        "largest minus second-largest softmax probability",
        "margin([1.0, 2.0, 3.0])",
        ("logits",),
    ),
    SqlFunction(
        "margin_probs",
        ("probs",),
        (SCORES,),
        DOUBLE,
        lists_to_doubles(probs(predictions.margin), PROBS_PAD),
        "largest minus second-largest probability",
        "margin_probs([0.2, 0.3, 0.5])",
        ("probs",),
    ),
    SqlFunction(
        "is_correct",
        (
            "scores",
            "label",
        ),
        (SCORES, BIGINT),
        BOOLEAN,
        correct_class("is_correct", LOGITS_PAD),
        "`predicted_class(scores) = label`",
        "is_correct([0.1, 2.5, 0.3], 1)",
        (
            "logits",
            "probs",
            "label",
        ),
    ),
    SqlFunction(
        "brier_score",
        (
            "logits",
            "label",
        ),
        (SCORES, BIGINT),
        DOUBLE,
        lists_and_label_to_doubles("brier_score", _of_softmax(losses.brier_score), LOGITS_PAD),
        "`sum_j (softmax(z)_j - [j = label])^2`, range [0, 2]",
        "brier_score([1.0, 2.0, 3.0], 2)",
        (
            "logits",
            "label",
        ),
    ),
    SqlFunction(
        "brier_score_probs",
        (
            "probs",
            "label",
        ),
        (SCORES, BIGINT),
        DOUBLE,
        lists_and_label_to_doubles("brier_score_probs", probs(losses.brier_score), PROBS_PAD),
        "`sum_j (p_j - [j = label])^2`, range [0, 2]",
        "brier_score_probs([0.2, 0.7, 0.1], 1)",
        (
            "probs",
            "label",
        ),
    ),
    SqlFunction(
        "binary_brier_score",
        (
            "p",
            "label",
        ),
        (DOUBLE, BIGINT),
        DOUBLE,
        binary_and_label_to_doubles(
            "binary_brier_score", binary_prob_matrix, lambda p, y: losses.brier_score(p, y) / 2.0
        ),
        "`(p - label)^2`, range [0, 1]",
        "binary_brier_score(0.8, 1)",
        (
            "binary",
            "probs",
        ),
    ),
    SqlFunction(
        "calibration_bin",
        (
            "confidence",
            "bins",
        ),
        (DOUBLE, BIGINT),
        INTEGER,
        confidence_to_bin,
        "0-based bin `m` with `m/B < c <= (m+1)/B` (c = 0 in bin 0)",
        "calibration_bin(0.55, 10)",
        ("confidence",),
    ),
    SqlFunction(
        "temperature_scaled_losses",
        (
            "scores",
            "label",
            "temperatures",
            "kind",
        ),
        (SCORES, BIGINT, SCORES, VARCHAR),
        SCORES,
        temperature_grid_udf,
        "cross-entropy of `softmax(z / t)` for each temperature `t` (`kind` = a `scores_kind`)",
        "temperature_scaled_losses([1.0, 2.0, 3.0], 0, [1.0, 2.0], 'logits')",
        (
            "logits",
            "probs",
            "grid",
        ),
    ),
    SqlFunction(
        "logit_row_stats",
        (
            "logits",
            "label",
            "bins",
        ),
        (SCORES, BIGINT, BIGINT),
        ROW_STATS,
        row_stats_udf(row_stats.logit_row_stats, LOGITS_PAD),
        "everything a rollup needs from one row of logits, in one call",
        "logit_row_stats([1.0, 2.0, 3.0], 2, 15)",
        (
            "logits",
            "row_stats",
        ),
    ),
    SqlFunction(
        "prob_row_stats",
        (
            "probs",
            "label",
            "bins",
        ),
        (SCORES, BIGINT, BIGINT),
        ROW_STATS,
        row_stats_udf(row_stats.prob_row_stats, PROBS_PAD),
        "everything a rollup needs from one row of probabilities, in one call",
        "prob_row_stats([0.2, 0.3, 0.5], 2, 15)",
        (
            "probs",
            "row_stats",
        ),
    ),
    SqlFunction(
        "normal_sf",
        ("z",),
        (DOUBLE,),
        DOUBLE,
        doubles_to_doubles(significance.normal_sf),
        "`P(Z > z)` for a standard normal `Z`, `erfc(z / sqrt 2) / 2`; two-sided p of a z: "
        "`2 * normal_sf(abs(z))`",
        "normal_sf(1.96)",
        ("statistic",),
    ),
)


# Where the SQL macro beat the Python UDF in the benchmark (bench/README.md: the mean
# cross-entropy at 10 and at 1000 classes); the UDF serves every other name.
MACRO_FASTER = frozenset({"cross_entropy"})


def chosen(fn: SqlFunction, functions: str = "fastest") -> str:
    """'macro' or 'udf': the implementation `register` puts under `fn`'s name."""
    if functions not in IMPLEMENTATIONS:
        raise ValueError(
            f"functions must be one of {', '.join(IMPLEMENTATIONS)}, got {functions!r}"
        )
    if functions == "fastest":
        return "macro" if fn.name in MACRO_FASTER else "udf"
    return functions.rstrip("s")


def register(
    con: duckdb.DuckDBPyConnection, functions: str = "fastest"
) -> duckdb.DuckDBPyConnection:
    """Add every dbmetrics function to `con`; calling it again replaces them harmlessly.

    functions: 'fastest' (default: per function the implementation the benchmark found
    faster, see MACRO_FASTER), 'macros' (every function as a SQL macro from the pack) or 'udf'
    (every function as a Python UDF over the numpy kernels, the reference implementation).
    The pack's helper macros are always loaded. UDFs get NULL arguments ("special" null
    handling) so that they can return NULL for empty or undefined rows.
    """
    macros.load_macros(con)
    for fn in FUNCTIONS:
        with contextlib.suppress(duckdb.InvalidInputException, duckdb.CatalogException):
            con.remove_function(fn.name)
        if chosen(fn, functions) == "macro":
            continue
        con.execute(f"DROP MACRO IF EXISTS {fn.name}")
        con.create_function(
            fn.name,
            fn.body,
            list(fn.params),
            fn.returns,
            type="arrow",
            null_handling="special",
            exception_handling="default",
            side_effects=False,
        )
    return con


def get(name: str) -> SqlFunction:
    """The catalogue entry called `name`."""
    for fn in FUNCTIONS:
        if fn.name == name:
            return fn
    raise KeyError(name)


def type_name(t) -> str:
    return str(t).upper()


def markdown_table() -> str:
    """The README's function table, one row per catalogue entry."""
    lines = ["| function | returns | computes |", "|---|---|---|"]
    for fn in FUNCTIONS:
        returns = "STRUCT" if fn.returns == ROW_STATS else type_name(fn.returns)
        computes = fn.description.replace("|", "\\|")  # a cell of a Markdown table
        lines.append(f"| `{fn.signature}` | {returns} | {computes} |")
    return "\n".join(lines) + "\n"
