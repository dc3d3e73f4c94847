"""The HTML report in a real browser: headless Chromium (Debian's package, installed by `make
test`'s `browser` step) opens a sample clip's report from disk and we check that every figure
loads, that the page asks for nothing over the network, that no console error appears, and save a
screenshot for a person to look at.

How each check can fail is shown on a control page with one broken image, one http image and a
console error: the same checks must catch all three there.

Chromium is driven by its own command line: ``--dump-dom`` prints the DOM after load, into which
a small inline checker (added to a copy of the report, never to the report itself) writes each
image's ``complete`` and ``naturalWidth``; ``--enable-logging=stderr --v=0`` prints console
messages as ``CONSOLE`` lines; ``--log-net-log`` records every network request with its initiator,
so the page's own requests can be told from Chromium's background ones (initiator "not an
origin"). Flags as in the machine notes: --headless --no-sandbox --disable-gpu --disable-quic
--no-first-run --disable-background-networking --disable-component-update --disable-sync and a new
empty --user-data-dir.
"""

from __future__ import annotations

import html
import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest

from railtrace.report_cmd import write_report

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_clips"

CHECKER = """<script>
window.addEventListener('load', function () {
  var r = Array.prototype.map.call(document.images, function (i) {
    return {ok: i.complete && i.naturalWidth > 0, w: i.naturalWidth, h: i.naturalHeight};
  });
  var p = document.createElement('pre'); p.id = 'rt-check'; p.textContent = JSON.stringify(r);
  document.body.appendChild(p);
});
</script>"""


def _chromium() -> str:
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    if Path("/usr/bin/chromium").is_file():
        return "/usr/bin/chromium"
    pytest.skip("headless Chromium is not installed (run 'make test' as root with apt-get, or "
                "'apt-get install chromium'); the browser test needs /usr/bin/chromium")


def _flags(profile: Path) -> list[str]:
    return ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            f"--user-data-dir={profile}"]


def open_page(page: Path, tmp: Path) -> dict:
    """Load ``page`` in headless Chromium: (image results, console lines, page-initiated
    non-local request URLs)."""
    exe = _chromium()
    probe = tmp / (page.stem + ".checked.html")
    text = page.read_text(encoding="utf-8")
    probe.write_text(text.replace("</body>", CHECKER + "</body>"), encoding="utf-8")
    profile = tmp / f"profile-{page.stem}"
    profile.mkdir()
    netlog = tmp / f"{page.stem}.netlog.json"
    cmd = [exe, *_flags(profile), "--dump-dom", "--virtual-time-budget=8000", "--enable-logging=stderr", "--v=0",
           f"--log-net-log={netlog}", probe.as_uri()]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=90)
    m = re.search(r'<pre id="rt-check">(.*?)</pre>', proc.stdout, re.S)
    assert m, f"the checker did not run (Chromium exit {proc.returncode}): {proc.stderr[-800:]}"
    images = json.loads(html.unescape(m.group(1)))
    console = [ln for ln in proc.stderr.splitlines() if "CONSOLE" in ln or "Uncaught" in ln]
    log = json.loads(netlog.read_text(encoding="utf-8"))
    names = {v: k for k, v in log["constants"]["logEventTypes"].items()}
    fetched = set()
    for e in log["events"]:
        p = e.get("params", {})
        if names.get(e["type"]) == "URL_REQUEST_START_JOB" and "url" in p:
            # Chromium's own background requests carry the initiator "not an origin"; the page's carry its origin.
            if p.get("initiator") != "not an origin" and not p["url"].startswith(("data:", "file:")):
                fetched.add(p["url"])
    return {"images": images, "console": console, "fetched": sorted(fetched)}


class _Refs(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.refs: list[str] = []
        self.tags: set[str] = set()

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        self.refs += [v for k, v in attrs if k in ("src", "href", "srcset", "data", "poster") and v]


def test_controls_catch_broken_image_network_and_console_error(tmp_path):
    page = tmp_path / "control.html"
    page.write_text('<!DOCTYPE html><html><body><img src="data:image/png;base64,AAAA">'
                    '<img src="http://127.0.0.1:9/none.png"><script>console.error("planted error")</script>'
                    "</body></html>", encoding="utf-8")
    got = open_page(page, tmp_path)
    assert [i["ok"] for i in got["images"]] == [False, False]
    assert any("planted error" in ln for ln in got["console"])
    assert got["fetched"] == ["http://127.0.0.1:9/none.png"]


@pytest.mark.parametrize("name", ["bank_practice", "cushion_check", "cut_bank", "multi_rail_30fps"])
def test_report_opens_offline_with_every_figure(tmp_path, name):
    folder = tmp_path / name
    shutil.copytree(SAMPLES / f"{name}.truth", folder)
    (folder / "run.json").write_text(json.dumps({"railtrace_version": "test", "clip": str(SAMPLES / f"{name}.mp4")}))
    report = write_report(folder)
    text = report.read_text(encoding="utf-8")
    refs = _Refs()
    refs.feed(text)
    # Self-contained: every reference is an embedded data URI or an anchor in the page.
    assert refs.refs and all(r.startswith(("data:", "#")) for r in refs.refs)
    assert not re.search(r"https?://", text)
    assert "script" not in refs.tags and "link" not in refs.tags
    got = open_page(report, tmp_path)
    n_shots = len((folder / "shots.csv").read_text().strip().splitlines()) - 1
    # One diagram per shot, the summary plot and the rail map at least.
    assert len(got["images"]) >= n_shots + 2
    bad = [i for i in got["images"] if not i["ok"]]
    assert not bad, f"{len(bad)} of {len(got['images'])} figures did not load"
    assert all(i["w"] >= 400 for i in got["images"]), "a figure loaded smaller than 400 px wide"
    assert got["fetched"] == [], f"the page fetched {got['fetched']}"
    assert got["console"] == [], f"console: {got['console']}"
    # A screenshot for a person to look at.
    shot = tmp_path / f"{name}_report.png"
    profile = tmp_path / "profile-shot"
    profile.mkdir()
    subprocess.run([_chromium(), *_flags(profile), "--hide-scrollbars", "--window-size=1280,2600",
                    f"--screenshot={shot}", report.as_uri()], capture_output=True, timeout=90)
    assert shot.is_file() and shot.stat().st_size > 50_000
    demo = ROOT / "demo_output"
    if demo.is_dir() and name == "bank_practice":
        shutil.copyfile(shot, demo / "report_screenshot.png")
