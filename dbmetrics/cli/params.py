"""Query parameters from ``--set PARAM=VALUE`` and the project file, checked against the template."""

from __future__ import annotations

import re
from pathlib import Path

import click

from dbmetrics.check import info
from dbmetrics.project import Project
from dbmetrics.project import merge as project_merge
from dbmetrics.queries import list_queries

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
QUERY_SETTING = "A query parameter; repeat for more. Wins over the project file."


def settings_option(help_text: str = QUERY_SETTING):
    """The repeatable ``--set PARAM=VALUE`` (``-s``) option, passed on as ``settings``."""
    return click.option(
        "--set", "-s", "settings", multiple=True, metavar="PARAM=VALUE", help=help_text
    )


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
    """Template defaults < project ``[params]`` < ``[queries.QUERY]`` < ``--set``
    (dbmetrics.project.merge), every project key checked against the saved queries and the
    check; the saved queries refuse unknown ``--set`` names."""
    return project_merge(query, declared, project, cli, _known_parameters(project.query_dirs))


def _known_parameters(query_dirs) -> dict[str, set[str]]:
    """query name -> its parameter names: every saved query in the folders that exist (a
    missing folder is the command's own error), and the check."""
    dirs = [d for d in query_dirs if Path(d).is_dir()]
    known = {q.name: {p.name for p in q.params} for q in list_queries(dirs)}
    known["check"] = {p.name for p in info().params}
    return known
