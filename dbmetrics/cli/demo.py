"""``dbmetrics demo OUT_DIR``: write the invented demo prediction logs."""

from __future__ import annotations

import click


@click.command("demo")
@click.argument("out_dir", metavar="OUT_DIR")
@click.option("--rows-per-day", type=click.IntRange(min=1), help="Predictions per day.")
@click.option("--weeks", type=click.IntRange(min=1), help="Weeks of logs.")
@click.option("--seed", type=int, help="Random seed (same seed, same files).")
@click.pass_obj
def command(session, out_dir, rows_per_day, weeks, seed):
    """Write invented demo logs, labels and a region table under OUT_DIR.

    \b
    Example:
      dbmetrics demo demo_parquet --weeks 8 --seed 7
    """
    from dbmetrics import demo

    options = {"rows_per_day": rows_per_day, "weeks": weeks, "seed": seed}
    demo.generate(out_dir, **{k: v for k, v in options.items() if v is not None})
    session.note(f"demo data written to {out_dir}")
