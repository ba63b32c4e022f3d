"""``python -m dbmetrics.demo.pictures [OUT_DIR]``: draw every picture of the README from the
committed demo data (run it from the repository root; default OUT_DIR docs/img).

Each picture is one ``dbmetrics`` command line (``COMMANDS``), run in this process; the
report's picture is a screenshot of ``dbmetrics report`` taken by headless Chromium. Needs the
``plot`` extra and a ``chromium`` on the PATH.
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

from .scenario import CLASSES, RETAILER

PROJECT = "demo_parquet/dbmetrics.toml"
BOTH_RUN = ["--start", "2026-03-02", "--end", "2026-03-23"]  # weeks 9-12: v1 and v2 side by side
V2_REFERENCE = ["--set", "ref_start=2026-03-16", "--set", "ref_end=2026-04-05"]

#: picture file -> the dbmetrics arguments that draw it (after --project PROJECT)
COMMANDS = {
    "reliability.png": ["plot", "reliability", *BOTH_RUN],
    "drift_alpine.png": [
        "plot", "trend", "--query", "drift", "--metric", "prediction_js", "--by", "region",
        "--only", "model_version=v2", *V2_REFERENCE,
    ],
    "cross_entropy_by_version.png": ["plot", "trend", "--metric", "cross_entropy"],
    "confusion.png": [
        "plot", "confusion", "--only", "region=east", "--start", "2026-04-27",
        "--class-names", ",".join(CLASSES),
        "--title", "Confusion matrix, east region, weeks 17-26 (invented demo data)",
    ],
}  # fmt: skip
REPORT = [
    "report", "--segment", "region",
    "--title", f"{RETAILER} returns desk: weekly report (invented demo data)",
]  # fmt: skip
SCREEN = (1200, 1800)  # pixels of the report's screenshot


def _chromium() -> str:
    """The Chromium executable, or a one-line error saying how to install it."""
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    if not found:
        sys.exit("pictures: the report screenshot needs Chromium (apt-get install chromium)")
    return found


def screenshot(page: Path, png: Path, size: tuple[int, int] = SCREEN) -> None:
    """A ``size`` screenshot of the top of ``page`` by headless Chromium, fetching nothing."""
    subprocess.run(
        [
            _chromium(),
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            "--proxy-server=127.0.0.1:9",
            f"--window-size={size[0]},{size[1]}",
            f"--screenshot={png}",
            page.resolve().as_uri(),
        ],
        check=True,
        capture_output=True,
        timeout=300,
    )


def draw(out_dir: Path) -> list[Path]:
    """Write every README picture into ``out_dir``; the paths written."""
    from dbmetrics.cli.main import cli

    out_dir.mkdir(parents=True, exist_ok=True)
    written = []
    for name, args in COMMANDS.items():
        cli.main(["--quiet", "--project", PROJECT, *args, "-o", str(out_dir / name)], "dbmetrics",
                 standalone_mode=False)  # fmt: skip
        written.append(out_dir / name)
    with tempfile.TemporaryDirectory() as tmp:
        page = Path(tmp) / "report.html"
        cli.main(["--quiet", "--project", PROJECT, *REPORT, "-o", str(page)], "dbmetrics",
                 standalone_mode=False)  # fmt: skip
        screenshot(page, out_dir / "report.png")
    written.append(out_dir / "report.png")
    return written


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(prog="python -m dbmetrics.demo.pictures", description=__doc__)
    parser.add_argument("out_dir", nargs="?", default="docs/img", help="folder for the PNGs")
    args = parser.parse_args(argv)
    if not Path(PROJECT).is_file():
        sys.exit(f"pictures: run from the repository root (no {PROJECT} here)")
    for path in draw(Path(args.out_dir)):
        print(path)


if __name__ == "__main__":
    main()
