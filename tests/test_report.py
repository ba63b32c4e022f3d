"""`dbmetrics report`: one self-contained HTML file that parses, fetches nothing, and renders in
a real headless browser (Chromium) with visible pictures."""

import base64
import html.parser
import io
import os
import re
import shutil
import subprocess
from importlib.util import find_spec
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from dbmetrics.cli.main import cli
from dbmetrics.report.page import CAUTIONS

ROOT = Path(__file__).resolve().parents[1]
PROJECT = ROOT / "demo_parquet" / "dbmetrics.toml"
VOID = {"meta", "img", "br", "hr", "input", "link", "source", "wbr", "col", "area", "base"}
BLUE, VERMILION = (0x00, 0x72, 0xB2), (0xD5, 0x5E, 0x00)  # Okabe-Ito: v1 and v2 lines

pytestmark = pytest.mark.skipif(find_spec("matplotlib") is None, reason="needs the 'plot' extra")


def chromium() -> str | None:
    return shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> Path:
    """The demo's report, by region, written by the command line from the repository root."""
    out = tmp_path_factory.mktemp("report") / "report.html"
    cwd = os.getcwd()
    os.chdir(ROOT)
    try:
        result = CliRunner().invoke(
            cli,
            ["--quiet", "--project", str(PROJECT), "report", "--segment", "region", "-o", str(out)],
        )
    finally:
        os.chdir(cwd)
    assert result.exit_code == 0, result.output
    return out


class Strict(html.parser.HTMLParser):
    """Every element closed in order; collects tags, attributes and text."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.tags, self.attrs, self.text = [], [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs += [(tag, k, v or "") for k, v in attrs]
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"</{tag}> closes {self.stack[-1:]}"
        self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def parse(path: Path) -> Strict:
    parser = Strict()
    parser.feed(path.read_text(encoding="utf-8"))
    parser.close()
    assert parser.stack == []
    return parser


def images(parsed: Strict) -> list[np.ndarray]:
    import matplotlib.image as mpimg

    sources = [v for tag, k, v in parsed.attrs if tag == "img" and k == "src"]
    prefix = "data:image/png;base64,"
    assert all(s.startswith(prefix) for s in sources)
    return [
        mpimg.imread(io.BytesIO(base64.b64decode(s[len(prefix) :])), format="png") for s in sources
    ]


def not_blank(pixels: np.ndarray) -> bool:
    """More than 2% of the pixels differ from white, and they are not all one colour."""
    rgb = pixels[..., :3].reshape(-1, 3)
    inked = (rgb < 0.95).any(axis=1).mean()
    return inked > 0.02 and rgb.std() > 0.05


def test_the_report_is_one_well_formed_page_with_every_section(report):
    parsed = parse(report)
    assert parsed.tags[:3] == ["html", "head", "meta"] and parsed.tags.count("body") == 1
    ids = [v for _, k, v in parsed.attrs if k == "id"]
    assert ids == ["latest", "flagged", "versions", "heatmap", "labels", "cautions"]
    text = " ".join(" ".join(parsed.text).split())
    assert CAUTIONS in text
    assert "prediction_js 0.0" in text and "alpine" in text  # the planted shift, with reasons
    assert "v2 against v1 in the latest periods where both ran" in text
    assert "cross entropy" in text and "unpaired" in text


def test_the_report_fetches_nothing(report):
    parsed = parse(report)
    source = report.read_text(encoding="utf-8")
    assert not {"script", "link", "iframe", "object", "embed", "base"} & set(parsed.tags)
    for tag, name, value in parsed.attrs:
        assert name not in ("href", "srcset", "action", "poster", "background"), (tag, name)
        if name == "src":
            assert value.startswith("data:image/png;base64,")
        assert not re.match(r"\s*(https?:|//|file:)", value), (tag, name)
    style = "".join(re.findall(r"<style>(.*?)</style>", source, flags=re.S))
    assert "url(" not in style and "@import" not in style and "@font-face" not in style


def test_every_picture_is_an_inline_png_with_ink(report):
    pictures = images(parse(report))
    assert len(pictures) == 6
    assert all(not_blank(p) for p in pictures)


@pytest.mark.slow
@pytest.mark.skipif(
    chromium() is None and not os.environ.get("CI"),
    reason="needs Chromium (apt-get install chromium); CI installs it",
)
def test_the_report_renders_in_headless_chromium(report, tmp_path):
    import matplotlib.image as mpimg

    assert chromium(), "Chromium is not installed: .ci/run installs it with apt-get"
    shot = tmp_path / "shot.png"
    subprocess.run(
        [
            chromium(),
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            "--proxy-server=127.0.0.1:9",  # a page that fetched anything would show it broken
            "--window-size=1200,9000",
            f"--screenshot={shot}",
            report.as_uri(),
        ],
        check=True,
        capture_output=True,
        timeout=180,
    )
    pixels = (mpimg.imread(shot)[..., :3] * 255).round().astype(int)
    assert pixels.shape[:2] == (9000, 1200)
    assert not_blank(pixels / 255.0)

    def count(colour):
        return int((np.abs(pixels - np.array(colour)).sum(axis=-1) <= 12).sum())

    # the version lines of the pictures, drawn by the browser from the inline images
    assert count(BLUE) > 500 and count(VERMILION) > 500


def test_the_report_needs_periods_in_the_range_and_known_parameters(tmp_path, monkeypatch):
    monkeypatch.chdir(ROOT)
    args = ["--project", str(PROJECT), "report", "-o", str(tmp_path / "r.html")]
    result = CliRunner().invoke(cli, [*args, "--set", "nope=1"])
    assert (
        result.exit_code == 1 and "no query of the report has a parameter 'nope'" in result.stderr
    )
    result = CliRunner().invoke(cli, [*args, "--start", "2030-01-05"])
    assert result.exit_code == 1 and "no periods in the range" in result.stderr
    assert not (tmp_path / "r.html").exists()


def test_a_log_without_labels_still_gets_a_report_with_notes_for_the_missing_pictures(
    tmp_path, monkeypatch
):
    monkeypatch.chdir(ROOT)
    monkeypatch.delenv("DBMETRICS_PROJECT", raising=False)
    out = tmp_path / "unlabelled.html"
    result = CliRunner().invoke(
        cli,
        [
            "--quiet",
            "report",
            "--set",
            "logs=demo_parquet/logs",
            "--set",
            "label_col=",
            "--latest",
            "2",
            "-o",
            str(out),
        ],
    )
    assert result.exit_code == 0, result.output
    parsed = parse(out)
    text = " ".join(" ".join(parsed.text).split())
    assert "No picture of cross-entropy over time: nothing to plot" in text
    assert "No arrival delay" in text
    assert all(not_blank(p) for p in images(parsed))  # the label-free pictures still drawn
