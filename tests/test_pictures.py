"""The README's pictures come from one documented command, and that command runs."""

import os
import re
import shutil
import struct
from importlib.util import find_spec
from pathlib import Path

import pytest

from dbmetrics.demo import pictures

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text()


def png_size(path: Path) -> tuple[int, int]:
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])


def test_the_readme_names_the_command_and_every_picture_it_shows_is_drawn_by_it():
    assert "`python -m dbmetrics.demo.pictures docs/img`" in README
    shown = {Path(p).name for p in re.findall(r"\]\((docs/img/[^)]+)\)", README)}
    assert shown == set(pictures.COMMANDS) | {"report.png"}
    assert all((ROOT / "docs" / "img" / name).is_file() for name in shown)


@pytest.mark.slow
@pytest.mark.skipif(find_spec("matplotlib") is None, reason="needs the 'plot' extra")
@pytest.mark.skipif(
    shutil.which("chromium") is None and not os.environ.get("CI"),
    reason="needs Chromium (apt-get install chromium); CI installs it",
)
def test_the_pictures_command_draws_every_picture(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(ROOT)
    pictures.main([str(tmp_path)])
    written = capsys.readouterr().out.split()
    assert [Path(p).name for p in written] == [*pictures.COMMANDS, "report.png"]
    for name in pictures.COMMANDS:
        assert png_size(tmp_path / name) == (1600, 1000)
    assert png_size(tmp_path / "report.png") == pictures.SCREEN
