"""Query parameters from ``--set PARAM=VALUE`` and the project file, checked against the template."""

from __future__ import annotations

import re

import click

from dbmetrics.cli.project import Project
from dbmetrics.errors import DbmetricsError

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")


def parse_settings(settings: tuple[str, ...]) -> dict[str, str]:
    """``("grain=week", "logs=a.parquet")`` -> ``{"grain": "week", "logs": "a.parquet"}``; last wins."""
    parsed = {}
    for item in settings:
        name, sep, value = item.partition("=")
        name = name.strip()
        if not sep:
            raise click.BadParameter(f"expected PARAM=VALUE, got {item!r}", param_hint="'--set'")
        if not _NAME.match(name):
            raise click.BadParameter(
                f"parameter name {name!r} is not a plain name (letters, digits, _)",
                param_hint="'--set'",
            )
        parsed[name] = value
    return parsed


def merge(query: str, declared: list[str], project: Project, cli: dict[str, str]) -> dict[str, str]:
    """Template defaults < project ``[params]`` < ``[queries.QUERY]`` < ``--set``.

    Unknown names in ``[queries.QUERY]`` are refused here, naming the file; the saved queries
    refuse unknown ``--set`` names.
    """
    unknown = [name for name in project.queries.get(query, {}) if name not in declared]
    if unknown:
        raise DbmetricsError(
            f"{project.path} [queries.{query}]: query '{query}' has no parameter '{unknown[0]}'; "
            f"its parameters are: {', '.join(declared) or '(none)'}"
        )
    return {**project.params_for(query, set(declared)), **cli}
