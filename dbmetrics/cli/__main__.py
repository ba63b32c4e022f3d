"""``python -m dbmetrics.cli``: the same as the ``dbmetrics`` command."""

from dbmetrics.cli.main import cli

if __name__ == "__main__":
    cli(prog_name="dbmetrics")
