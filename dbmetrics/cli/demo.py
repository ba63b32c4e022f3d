"""``dbmetrics demo DIR``: write the invented demo logs and a project file to try the commands on."""

from __future__ import annotations

import shlex
from pathlib import Path

import click

from dbmetrics.errors import DbmetricsError

PROJECT = """\
# Project file for the invented demo logs (dbmetrics demo): the column roles set once for
# every query. Paths are relative to this folder: run dbmetrics from here.
[params]
logs = "logs"
labels = "labels/labels.parquet"
id_col = "prediction_id"
"""


@click.command("demo")
@click.argument("out_dir", metavar="DIR")
@click.option("--rows-per-day", type=click.IntRange(min=1), help="Predictions per day.")
@click.option("--weeks", type=click.IntRange(min=1), help="Weeks of logs.")
@click.option("--seed", type=int, help="Random seed (same seed, same files).")
@click.option("--force", is_flag=True, help="Write into DIR even if it is not empty.")
@click.pass_obj
def command(session, out_dir, rows_per_day, weeks, seed, force):
    """Write invented demo logs, labels, a region table and a project file into DIR.

    DIR must be new or empty (or pass --force; a dbmetrics.toml already there is kept).
    Then `cd DIR && dbmetrics run rollup`: the project file there sets the column roles.

    \b
    Example:
      dbmetrics demo demo_try --weeks 8 --seed 7
    """
    from dbmetrics import demo
    from dbmetrics.atomic import atomic_write

    target = Path(out_dir)
    if target.exists() and not target.is_dir():
        raise DbmetricsError(f"demo: '{out_dir}' is a file; give a new or empty folder")
    if target.is_dir() and any(target.iterdir()) and not force:
        raise DbmetricsError(
            f"demo: '{out_dir}' is not empty; give a new or empty folder, "
            "or --force to write the demo files into it"
        )
    options = {"rows_per_day": rows_per_day, "weeks": weeks, "seed": seed}
    demo.generate(out_dir, **{k: v for k, v in options.items() if v is not None})
    project_file = target / "dbmetrics.toml"
    if project_file.exists():  # --force into a folder with its own project file: keep it
        session.note(f"demo data (invented) written to {out_dir}; kept its dbmetrics.toml")
    else:
        project = PROJECT.encode()
        atomic_write(str(project_file), lambda f: f.write(project))
        session.note(f"demo data (invented) and a project file written to {out_dir}")
    click.echo(f"next: cd {shlex.quote(out_dir)} && dbmetrics run rollup")
