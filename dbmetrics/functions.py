"""The SQL functions dbmetrics adds to DuckDB: one declarative table, one `register`.

Adding a function = a kernel in `kernels/`, a row in FUNCTIONS, a test, a line in
the README's function table (tests/test_docs.py checks the README lists every row).
"""

import contextlib
from collections.abc import Callable
from dataclasses import dataclass

import duckdb
from duckdb.sqltypes import BIGINT, BOOLEAN, DOUBLE, INTEGER, VARCHAR

from .kernels import distributions as dist
from .kernels import losses, predictions, row_stats, softmax
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


@dataclass(frozen=True)
class SqlFunction:
    name: str
    params: tuple
    returns: object
    body: Callable
    summary: str


def probs(kernel):
    """Apply a kernel to checked, renormalised probabilities."""
    return lambda p, *rest: kernel(dist.as_distribution(p), *rest)


def of_softmax(kernel):
    """Apply a kernel to the softmax probabilities of logits."""
    return lambda z, *rest: kernel(softmax.softmax(z), *rest)


FUNCTIONS = (
    SqlFunction(
        "log_softmax",
        (SCORES,),
        SCORES,
        lists_to_lists(softmax.log_softmax, LOGITS_PAD),
        "log-probabilities z - logsumexp(z); -inf logit = masked class",
    ),
    SqlFunction(
        "softmax",
        (SCORES,),
        SCORES,
        lists_to_lists(softmax.softmax, LOGITS_PAD),
        "probabilities exp(z - logsumexp(z))",
    ),
    SqlFunction(
        "logsumexp",
        (SCORES,),
        DOUBLE,
        lists_to_doubles(softmax.logsumexp, LOGITS_PAD),
        "max(z) + log(sum(exp(z - max(z))))",
    ),
    SqlFunction(
        "as_distribution",
        (SCORES,),
        SCORES,
        lists_to_lists(dist.as_distribution, PROBS_PAD),
        "probabilities checked (>= 0, sum within 1e-3 of 1) and renormalised; else NULL",
    ),
    SqlFunction(
        "cross_entropy",
        (SCORES, BIGINT),
        DOUBLE,
        lists_and_label_to_doubles("cross_entropy", losses.cross_entropy_logits, LOGITS_PAD),
        "-log softmax(logits)[label], label 0-based",
    ),
    SqlFunction(
        "cross_entropy_probs",
        (SCORES, BIGINT),
        DOUBLE,
        lists_and_label_to_doubles("cross_entropy_probs", losses.cross_entropy_probs, PROBS_PAD),
        "-log probs[label]; +inf when that probability is 0",
    ),
    SqlFunction(
        "soft_cross_entropy",
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "soft_cross_entropy", losses.soft_cross_entropy_logits, LOGITS_PAD, "the target"
        ),
        "-sum target * log softmax(logits)",
    ),
    SqlFunction(
        "soft_cross_entropy_probs",
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "soft_cross_entropy_probs", losses.soft_cross_entropy_probs, PROBS_PAD, "the target"
        ),
        "-sum target * log probs",
    ),
    SqlFunction(
        "binary_cross_entropy",
        (DOUBLE, BIGINT),
        DOUBLE,
        binary_and_label_to_doubles("binary_cross_entropy", binary_logit_matrix, binary_logit_loss),
        "log-loss of one logit (log-odds of class 1) against a 0/1 label",
    ),
    SqlFunction(
        "binary_cross_entropy_prob",
        (DOUBLE, BIGINT),
        DOUBLE,
        binary_and_label_to_doubles(
            "binary_cross_entropy_prob", binary_prob_matrix, losses.cross_entropy_probs
        ),
        "log-loss of one probability of class 1 against a 0/1 label",
    ),
    SqlFunction(
        "kl_divergence",
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "kl_divergence",
            lambda p, q: dist.kl_divergence(dist.as_distribution(p), dist.as_distribution(q)),
            PROBS_PAD,
            "q",
        ),
        "sum p log(p/q); +inf where q = 0 < p",
    ),
    SqlFunction(
        "js_divergence",
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "js_divergence",
            lambda p, q: dist.js_divergence(dist.as_distribution(p), dist.as_distribution(q)),
            PROBS_PAD,
            "q",
        ),
        "Jensen-Shannon divergence in nats, within [0, log 2]",
    ),
    SqlFunction(
        "population_stability_index",
        (SCORES, SCORES),
        DOUBLE,
        two_lists_to_doubles(
            "population_stability_index",
            lambda a, e: dist.population_stability_index(dist.normalised(a), dist.normalised(e)),
            PROBS_PAD,
            "expected",
        ),
        "sum (a - e) log(a/e) over normalised counts; +inf if a bin is empty in one only",
    ),
    SqlFunction(
        "shannon_entropy",
        (SCORES,),
        DOUBLE,
        lists_to_doubles(probs(dist.entropy), PROBS_PAD),
        "-sum p log p of a probability list (0 log 0 = 0)",
    ),
    SqlFunction(
        "softmax_entropy",
        (SCORES,),
        DOUBLE,
        lists_to_doubles(of_softmax(dist.entropy), LOGITS_PAD),
        "entropy of softmax(logits)",
    ),
    SqlFunction(
        "predicted_class",
        (SCORES,),
        INTEGER,
        lists_to_class(predictions.predicted_class, LOGITS_PAD),
        "0-based index of the first maximum score",
    ),
    SqlFunction(
        "confidence",
        (SCORES,),
        DOUBLE,
        lists_to_doubles(of_softmax(predictions.confidence), LOGITS_PAD),
        "largest softmax probability",
    ),
    SqlFunction(
        "confidence_probs",
        (SCORES,),
        DOUBLE,
        lists_to_doubles(probs(predictions.confidence), PROBS_PAD),
        "largest probability",
    ),
    SqlFunction(
        "margin",
        (SCORES,),
        DOUBLE,
        lists_to_doubles(of_softmax(predictions.margin), LOGITS_PAD),
        "top-1 minus top-2 softmax probability",
    ),
    SqlFunction(
        "margin_probs",
        (SCORES,),
        DOUBLE,
        lists_to_doubles(probs(predictions.margin), PROBS_PAD),
        "top-1 minus top-2 probability",
    ),
    SqlFunction(
        "is_correct",
        (SCORES, BIGINT),
        BOOLEAN,
        correct_class("is_correct", LOGITS_PAD),
        "predicted_class(scores) = label",
    ),
    SqlFunction(
        "brier_score",
        (SCORES, BIGINT),
        DOUBLE,
        lists_and_label_to_doubles("brier_score", of_softmax(losses.brier_score), LOGITS_PAD),
        "sum_j (softmax(logits)_j - [j = label])^2, range [0, 2]",
    ),
    SqlFunction(
        "brier_score_probs",
        (SCORES, BIGINT),
        DOUBLE,
        lists_and_label_to_doubles("brier_score_probs", probs(losses.brier_score), PROBS_PAD),
        "sum_j (p_j - [j = label])^2, range [0, 2]",
    ),
    SqlFunction(
        "binary_brier_score",
        (DOUBLE, BIGINT),
        DOUBLE,
        binary_and_label_to_doubles(
            "binary_brier_score", binary_prob_matrix, lambda p, y: losses.brier_score(p, y) / 2.0
        ),
        "(p - label)^2 for one probability of class 1, range [0, 1]",
    ),
    SqlFunction(
        "calibration_bin",
        (DOUBLE, BIGINT),
        INTEGER,
        confidence_to_bin,
        "0-based bin m with m/B < c <= (m+1)/B, c = 0 in bin 0",
    ),
    SqlFunction(
        "temperature_scaled_losses",
        (SCORES, BIGINT, SCORES, VARCHAR),
        SCORES,
        temperature_grid_udf,
        "cross-entropy of softmax(z / t) for each t in a list; kind 'logits' or 'probs'",
    ),
    SqlFunction(
        "logit_row_stats",
        (SCORES, BIGINT, BIGINT),
        ROW_STATS,
        row_stats_udf(row_stats.logit_row_stats, LOGITS_PAD),
        "every per-row quantity a rollup needs, from logits",
    ),
    SqlFunction(
        "prob_row_stats",
        (SCORES, BIGINT, BIGINT),
        ROW_STATS,
        row_stats_udf(row_stats.prob_row_stats, PROBS_PAD),
        "every per-row quantity a rollup needs, from probabilities",
    ),
)


def register(con: duckdb.DuckDBPyConnection) -> duckdb.DuckDBPyConnection:
    """Add every dbmetrics function to `con`; calling it again replaces them harmlessly.

    NULL arguments reach the bodies ("special" null handling) so that they can return
    NULL for empty or undefined rows, which DuckDB's default handling forbids.
    """
    for fn in FUNCTIONS:
        with contextlib.suppress(duckdb.InvalidInputException, duckdb.CatalogException):
            con.remove_function(fn.name)
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
