"""``dbmetrics queries [NAME]``: list saved queries, or show one query's parameters."""

from __future__ import annotations

import click
import pyarrow as pa

from dbmetrics.cli.textable import render


@click.command("queries")
@click.argument("name", required=False)
@click.pass_obj
def command(session, name):
    """List the saved queries (ours and your folders), or describe the query NAME.

    A file of yours that cannot be used is named on stderr with its problem.

    \b
    Example:
      dbmetrics queries && dbmetrics queries rollup
    """
    from dbmetrics import queries

    dirs = session.query_dirs
    if name is None:
        found, broken = queries.scan_queries(query_dirs=dirs)
        listing = pa.table(
            {
                "query": [q.name for q in found],
                "from": [str(q.origin) for q in found],
                "description": [q.summary for q in found],
            }
        )
        click.echo(render(listing, count=False, width=None), nl=False)
        for bad in broken:
            click.echo(f"not listed: {bad.problem}", err=True)
        return
    click.echo(_describe(queries.get_query(name, query_dirs=dirs)), nl=False)


def _describe(info) -> str:
    """Summary, file, parameters, output columns, notes and the example, from the header."""
    params = pa.table(
        {
            "parameter": [p.name for p in info.params],
            "type": [str(p.type) for p in info.params],
            "default": ["(required)" if p.required else _show(p.default) for p in info.params],
            "meaning": [p.help for p in info.params],
        }
    )
    parts = [f"{info.name}: {info.summary}\nfile: {info.path}\n"]
    parts.append(render(params, count=False, width=None) if info.params else "(no parameters)\n")
    if info.outputs:
        outputs = pa.table(
            {"column": [c for c, _ in info.outputs], "meaning": [m for _, m in info.outputs]}
        )
        parts.append("Output columns:\n" + render(outputs, count=False, width=None))
    if info.notes:
        parts.append("Notes:\n" + "".join(f"  {note}\n" for note in info.notes))
    parts.append("Example:\n" + "".join(f"  {line}\n" for line in str(info.example).splitlines()))
    return "\n".join(parts)


def _show(default) -> str:
    return "(unset)" if default is None else str(default)
