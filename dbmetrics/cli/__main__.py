"""``python -m dbmetrics.cli``: the same as the ``dbmetrics`` command."""

from dbmetrics.cli.main import cli

cli(prog_name="dbmetrics")
