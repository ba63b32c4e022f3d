"""``python -m dbmetrics.demo OUT_DIR``: write the demo dataset into OUT_DIR."""

import argparse

from .dataset import DEFAULT_ROWS_PER_DAY, DEFAULT_SEED, DEFAULT_WEEKS, generate


def main(argv=None) -> None:
    """Parse ``argv`` and call ``generate``; print the written paths."""
    parser = argparse.ArgumentParser(
        prog="python -m dbmetrics.demo",
        description=__doc__,
        epilog="example: python -m dbmetrics.demo demo_parquet --rows-per-day 250 --weeks 26 --seed 7",
    )
    parser.add_argument("out_dir", help="folder to write logs/, labels/ and regions.csv into")
    parser.add_argument(
        "--rows-per-day", type=int, default=DEFAULT_ROWS_PER_DAY, help="predictions per day"
    )
    parser.add_argument("--weeks", type=int, default=DEFAULT_WEEKS, help="weeks of predictions")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="seed of the PCG64 streams")
    args = parser.parse_args(argv)
    paths = generate(args.out_dir, seed=args.seed, rows_per_day=args.rows_per_day, weeks=args.weeks)
    for name, path in paths.items():
        print(f"{name}: {path}")


if __name__ == "__main__":
    main()
