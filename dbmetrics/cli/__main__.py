"""``python -m dbmetrics.cli`` and the ``dbmetrics`` command, with Ctrl-C honoured at any moment.

Loading DuckDB and pyarrow takes a noticeable time, and a KeyboardInterrupt raised inside a C
extension's initialisation can surface as an unrelated ImportError with a traceback. Nothing is
open or written while the command line loads, so a Ctrl-C then ends the process at once; from
then on it interrupts the running query (progress.py) and the command cleans up. Either way it
ends with status 130 and one line. (Only in the first moments of Python's own start-up, before
this module runs, does Python print its own traceback.)
"""

import os
import signal
import sys

EXIT_INTERRUPTED = 130


def main() -> None:
    """Load the command line (Ctrl-C ends the process at once), then run it."""
    previous = signal.signal(signal.SIGINT, _while_loading)
    try:
        from dbmetrics.cli.main import cli
    finally:
        signal.signal(signal.SIGINT, previous)
    try:
        cli(prog_name="dbmetrics")
    except KeyboardInterrupt:  # while click reports or cleans up
        interrupted()


def _while_loading(signum, frame) -> None:
    os.write(2, b"\ndbmetrics: interrupted\n")
    os._exit(EXIT_INTERRUPTED)


def interrupted() -> None:
    """Exit with status 130 and one line on stderr."""
    sys.stderr.write("\ndbmetrics: interrupted\n")
    sys.stderr.flush()
    sys.exit(EXIT_INTERRUPTED)


if __name__ == "__main__":
    main()
