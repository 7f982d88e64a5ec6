"""Open the summary from disk in headless Chromium: figures drawn, no errors, no injection."""

from __future__ import annotations

import os
import re
import subprocess
from pathlib import Path

import optuna
import pytest
from optuna.distributions import FloatDistribution
from optuna.trial import TrialState

from benchmarks.synthetic_study import make_synthetic_study, synthetic_trial
from sweeper.report.render import build_report
from sweeper.store.connect import open_storage

CHROMIUM = Path("/usr/bin/chromium")
MARK = "document.documentElement.dataset.pwned"
PAYLOADS = (
    f'<script>{MARK}="script"</script>',
    f"<img src=x onerror=\"{MARK}='img'\">",
    f"\"onload=\"{MARK}='attribute'",
    f"</script><script>{MARK}='breakout'</script><!--",
)

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(
        not CHROMIUM.exists(), reason="needs headless Chromium at /usr/bin/chromium"
    ),
]


def _hostile_study(location: Path) -> None:
    name = "".join(PAYLOADS)
    make_synthetic_study(str(location), trials=40, epochs=8, name=name)
    storage = open_storage(str(location), heartbeat=False)
    study = optuna.load_study(study_name=name, storage=storage)
    space = {payload: FloatDistribution(0.0, 1.0) for payload in PAYLOADS}
    failure = {"type": PAYLOADS[0], "message": PAYLOADS[3], "traceback": PAYLOADS[1]}
    for offset, payload in enumerate(PAYLOADS):
        study.add_trial(
            synthetic_trial(
                40 + offset,
                state=TrialState.FAIL if offset == 0 else TrialState.COMPLETE,
                value=None if offset == 0 else 0.2,
                params={payload: 0.5},
                distributions=space,
                user_attrs={"worker": payload, "end_reason": payload, "failure": failure},
            )
        )
    study.set_user_attr("task_description", PAYLOADS[2])
    storage.engine.dispose()


def _dump_dom(page: Path, profile: Path) -> tuple[str, str]:
    command = [
        str(CHROMIUM),
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--host-resolver-rules=MAP * ~NOTFOUND",  # any network request would fail loudly
        f"--user-data-dir={profile}",
        "--enable-logging=stderr",
        "--virtual-time-budget=10000",
        "--dump-dom",
        page.as_uri(),
    ]
    done = subprocess.run(command, capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout, done.stderr


def test_the_summary_renders_in_a_browser_without_errors_or_injection(tmp_path: Path) -> None:
    _hostile_study(tmp_path / "hostile.db")
    page = build_report(str(tmp_path / "hostile.db"), tmp_path / "summary.html")
    dom, log = _dump_dom(page, tmp_path / "profile")
    status = re.search(r'<div id="sweeper-status"([^>]*)>(.*?)</div>', dom, re.S)
    assert status is not None, "the page's script never ran"
    attributes = dict(re.findall(r'data-([a-z-]+)="([^"]*)"', status.group(1)))
    assert status.group(2).count("<li>") == 0, status.group(2)
    assert attributes["errors"] == "0"
    # the timeline is inside the folded operations section: drawn when a reader opens it
    assert attributes["figures-expected"] == "15"
    assert attributes["figures-rendered"] == "14"
    assert attributes["figures-folded"] == "1"
    assert dom.count('class="plot js-plotly-plot"') == 14  # plotly marks every drawn figure
    assert not re.search(r"<html[^>]*data-pwned", dom)  # no injected script or handler ran
    assert "Uncaught" not in log
    assert "Refused to" not in log


PROBE = """<script>
document.addEventListener("DOMContentLoaded", function () {
  var table = document.querySelector("#ranked table");
  var headings = table.tHead.rows[0].cells;
  function column(i) {
    return Array.prototype.map.call(table.tBodies[0].rows, function (row) {
      return row.cells[i].textContent;
    }).join(",");
  }
  headings[1].click();
  headings[1].click();
  document.documentElement.dataset.trialsDown = column(1);
  headings[3].click();
  document.documentElement.dataset.valuesUp = column(3);
});
</script></body>"""


def test_the_ranked_table_sorts_by_a_clicked_column(tmp_path: Path) -> None:
    make_synthetic_study(str(tmp_path / "s.db"), trials=14, epochs=3, seed=2)
    page = build_report(str(tmp_path / "s.db"), tmp_path / "summary.html")
    # A probe script clicks the headings; the page's policy would block it, so drop the policy.
    text = re.sub(r'<meta http-equiv="Content-Security-Policy"[^>]*>', "", page.read_text())
    page.write_text(text.replace("</body>", PROBE))
    dom, _ = _dump_dom(page, tmp_path / "profile")
    trials = re.search(r'data-trials-down="([^"]*)"', dom)
    values = re.search(r'data-values-up="([^"]*)"', dom)
    assert trials is not None and values is not None
    assert trials.group(1) == ",".join(f"#{n}" for n in range(13, -1, -1))
    shown = values.group(1).split(",")
    numbers = [float(v) for v in shown if v != "–"]
    assert numbers == sorted(numbers) and len(numbers) >= 10
    assert shown[len(numbers) :] == ["–"] * (len(shown) - len(numbers))  # no value sorts last


# The summary is opened inside a frame of each width: headless Chromium will not make its
# own window narrower than 500 px, but a frame's viewport is exactly as wide as the frame.
WIDTHS = (390, 1400)
FRAME_HEIGHT = 14000
SCREENSHOTS = Path(
    os.environ.get("SWEEPER_SCREENSHOTS", Path(__file__).resolve().parents[1] / "build" / "shots")
)
LAYOUT_PROBE = (Path(__file__).parent / "layout_probe.js").read_text()
FRAME_PAGE = """<!doctype html><html><head><meta charset="utf-8"></head>
<body style="margin:0"><iframe src="{page}" style="width:{width}px;height:{height}px;border:0"
scrolling="no"></iframe><script>
window.addEventListener("message", function (event) {{
  var found = JSON.parse(event.data);
  Object.keys(found).forEach(function (key) {{ document.body.dataset[key] = found[key]; }});
}});
</script></body></html>"""


def _chromium(page: Path, profile: Path, *extra: str) -> str:
    command = [
        str(CHROMIUM),
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--hide-scrollbars",
        "--host-resolver-rules=MAP * ~NOTFOUND",
        f"--user-data-dir={profile}",
        "--virtual-time-budget=20000",
        *extra,
        page.as_uri(),
    ]
    done = subprocess.run(command, capture_output=True, text=True, timeout=180, check=False)
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout


@pytest.fixture(scope="module")
def probed_page(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A summary of a 120-trial study with the layout probe added, its folds all opened."""
    folder = tmp_path_factory.mktemp("layout")
    make_synthetic_study(str(folder / "s.db"), trials=120, epochs=12, seed=5)
    page = build_report(str(folder / "s.db"), folder / "summary.html")
    # The probe is a script of ours the page's policy does not list, so drop the policy.
    text = re.sub(r'<meta http-equiv="Content-Security-Policy"[^>]*>', "", page.read_text())
    page.write_text(text.replace("</body>", f"<script>{LAYOUT_PROBE}</script></body>"))
    return page


@pytest.mark.parametrize("width", WIDTHS)
def test_the_summary_fits_its_width_and_draws_every_figure(probed_page: Path, width: int) -> None:
    folder = probed_page.parent
    frame = folder / f"frame{width}.html"
    frame.write_text(FRAME_PAGE.format(page=probed_page.name, width=width, height=FRAME_HEIGHT))
    window = f"--window-size={max(width, 500)},{FRAME_HEIGHT}"
    dom = _chromium(frame, folder / f"profile{width}", window, "--dump-dom")
    body = re.search(r"<body([^>]*)>", dom)
    assert body is not None
    found = dict(re.findall(r'data-([a-z-]+)="([^"]*)"', body.group(1)))
    assert found.get("measured") == "yes", found
    assert found["viewport"] == str(width)
    assert found["errors"] == "0", found.get("error-list")
    assert found["figures-rendered"] == found["figures-expected"] == "15"
    assert found["page-width"] == str(width)  # the page never scrolls sideways
    assert found["wide"] == ""  # no element reaches past the viewport (tables scroll inside)
    assert found["untitled"] == ""  # every axis with tick labels has a title
    assert found["toolbars"] == "0"  # no chart-library toolbar
    assert int(found["nav-rows"]) >= (2 if width < 500 else 1)  # the navigation wraps
    # A screenshot of the whole page, for a person to look at: the frame as tall as the page.
    height = int(found["height"])
    frame.write_text(FRAME_PAGE.format(page=probed_page.name, width=width, height=height))
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)
    shot = SCREENSHOTS / f"summary-{width}px.png"
    window = f"--window-size={max(width, 500)},{height}"
    _chromium(frame, folder / f"shot{width}", window, f"--screenshot={shot}")
    assert shot.stat().st_size > 10_000
