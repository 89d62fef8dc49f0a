"""The README shows every chart the run publishes, each with one sentence on how to read it (issue 12).

The images are the demo run's own charts, copied by `make readme-charts` into reports/charts/; these tests
check that the set matches what the run publishes today and that each is shown and explained, not that
the pixels match (fonts and library versions move pixels; common practice, no source)."""

from __future__ import annotations

import re
from pathlib import Path

import matplotlib.image as mpimg

ROOT = Path(__file__).resolve().parents[1]
CHARTS = ROOT / "reports" / "charts"


def _charts_section() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    start = text.index("\n## Charts\n")
    end = text.index("\n## ", start + 1)
    return text[start:end]


def test_every_published_chart_is_in_reports_charts_and_shown_in_the_readme(demo_run_copy):
    published = sorted(p.name for p in demo_run_copy.glob("*.png"))
    assert len(published) >= 7
    assert sorted(p.name for p in CHARTS.glob("*.png")) == published, "run `make readme-charts` and commit"
    section = _charts_section()
    for name in published:
        image = f"](reports/charts/{name})"
        assert image in section, f"README Charts section does not show {name}"
        # the image comes under a heading with its file name and one sentence on how to read it
        heading = re.search(rf"^### .*`{re.escape(name)}`.*$", section, flags=re.MULTILINE)
        assert heading, f"no heading for {name}"
        after = section[heading.end():section.index(image)]
        assert re.search(r"[a-z].*\.", after), f"no sentence on how to read {name}"


def test_the_committed_charts_are_readable_pngs_of_the_run_size():
    for path in sorted(CHARTS.glob("*.png")):
        pixels = mpimg.imread(path)
        height, width = pixels.shape[:2]
        assert width >= 800 and height >= 400, path.name  # drawn at the run's 110 dpi, not a thumbnail
