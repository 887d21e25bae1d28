"""The report in a real browser: headless Chromium opens it from a local file.

Checks: the page loads and shows its sections (DOM dump), no console message (the report has no
script, so any message means a blocked load or a broken page), no request to the network made by
the page (Chromium's own net log), and a screenshot is a non-empty PNG of the window size.

A control page with an external image and a console error proves that the two detectors see what
they are meant to see (so these tests can fail).

Needs the Debian packages ``chromium`` (and ``chromium-driver`` for other uses); skipped, with the
reason, only where Chromium is not installed.
"""

from __future__ import annotations

import json
import re
import shutil
import struct
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from wallstress import findings as fnd
from wallstress.analysis import flags
from wallstress.analysis.result import Analysis
from wallstress.report import page as R

CHROMIUM = next(
    (p for p in (shutil.which("chromium"), "/usr/bin/chromium") if p and Path(p).exists()), None
)
pytestmark = pytest.mark.skipif(
    CHROMIUM is None or not sys.platform.startswith("linux"),
    reason="Chromium is not installed (apt-get install chromium chromium-driver)",
)

FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--hide-scrollbars",
    # Nothing may reach a real host even if something tried: names resolve to nothing.
    "--host-resolver-rules=MAP * ~NOTFOUND",
)
EVIL = "<script>alert(1)</script>"
WINDOW = (1200, 1600)


# ------------------------------------------------------------------------------------------
# running Chromium
# ------------------------------------------------------------------------------------------


def run_chromium(page: Path, work: Path, *extra: str) -> SimpleNamespace:
    """Run headless Chromium on a local file with a fresh profile and a net log."""
    work.mkdir(parents=True, exist_ok=True)
    net_log = work / "net.json"
    cmd = [
        CHROMIUM,
        *FLAGS,
        f"--user-data-dir={work / 'profile'}",
        f"--log-net-log={net_log}",
        "--enable-logging=stderr",
        "--v=0",
        *extra,
        page.resolve().as_uri(),
    ]
    proc = subprocess.run(cmd, capture_output=True, timeout=180, cwd=work)
    return SimpleNamespace(
        rc=proc.returncode,
        stdout=proc.stdout.decode("utf-8", "replace"),
        stderr=proc.stderr.decode("utf-8", "replace"),
        net_log=net_log,
    )


def console_messages(stderr: str) -> list[str]:
    """Console output of pages (Chromium logs it as ``INFO:CONSOLE...`` lines)."""
    return [ln for ln in stderr.splitlines() if ":CONSOLE" in ln]


def _load_net_log(path: Path) -> dict:
    text = path.read_text(encoding="utf-8", errors="replace").strip()
    try:
        return json.loads(text)
    except json.JSONDecodeError:  # a log cut short at exit lacks its closing brackets
        return json.loads(text.rstrip(",\n") + "]}")


def page_requests(path: Path) -> list[str]:
    """Network URLs (http, https, ws) requested by the page, from Chromium's net log.

    The browser's own background requests (update checks and the like) have no web origin as
    initiator ("not an origin") and are left out; requests a page makes carry its origin
    ("null" or file://).
    """
    log = _load_net_log(path)
    types = {v: k for k, v in log["constants"]["logEventTypes"].items()}
    urls = []
    for e in log.get("events", []):
        if types.get(e.get("type")) != "URL_REQUEST_START_JOB":
            continue
        p = e.get("params", {})
        url = str(p.get("url", ""))
        if not re.match(r"(?i)(https?|wss?)://", url):
            continue
        initiator = str(p.get("initiator", ""))
        nik = str(p.get("network_isolation_key", ""))
        if initiator != "not an origin" or "file://" in nik:
            urls.append(url)
    return urls


def png_size(data: bytes) -> tuple[int, int]:
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])


# ------------------------------------------------------------------------------------------
# a report of invented data
# ------------------------------------------------------------------------------------------


def _analysis() -> Analysis:
    n = 16
    i = np.arange(n)
    canonical = pd.DataFrame(
        {
            "study_id": [f"E{k:03d}" for k in i],
            "patient_id": [EVIL if k < 3 else f"HX{k // 3:02d}" for k in i],
            "study_date": pd.Timestamp("2019-05-01") + pd.to_timedelta(i * 150, unit="D"),
            "sex": np.where(i % 2 == 0, "F", "M"),
        }
    )
    outputs = pd.DataFrame(
        {
            "bsa_m2": 1.9,
            "lv_mass_g": np.linspace(150, 270, n),
            "lvmi_bsa_g_m2": np.linspace(78, 142, n),
            "rwt": np.linspace(0.34, 0.54, n),
            "geometry": np.array(
                [
                    "normal",
                    "concentric_remodelling",
                    "concentric_hypertrophy",
                    "eccentric_hypertrophy",
                ]
            )[i % 4],
            "cess_kdyn_cm2": np.linspace(110, 230, n),
            "midwall_fs_pct": np.linspace(19, 13.5, n),
        }
    )
    f = fnd.make([2, 5], code="pwd_atypical", severity="warning", message="PWd unusual; check it.")
    outputs["flags"] = flags.flags_per_row(f, n).to_numpy()
    return Analysis(
        pd.concat([canonical, outputs], axis=1),
        canonical,
        outputs,
        f,
        {"options": {"reference": "ase_eacvi_2015"}},
    )


def _tracking(a: Analysis) -> SimpleNamespace:
    v = a.frame().copy()
    first = v.groupby("patient_id")["study_date"].transform("min")
    v["years_since_baseline"] = (v["study_date"] - first).dt.days / 365.25
    p = pd.DataFrame(
        {
            "patient_id": v["patient_id"].unique(),
            "verdict": "stable",
            "verdict_text": "no change beyond the least significant change",
        }
    )
    return SimpleNamespace(visits=v, patients=p, transitions=None)


@pytest.fixture(scope="module")
def report_file(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("browser")
    a = _analysis()
    return R.write_report(a, d / "report.html", tracking=_tracking(a), title="Invented clinic")


@pytest.fixture(scope="module")
def dom_run(report_file, tmp_path_factory):
    return run_chromium(report_file, tmp_path_factory.mktemp("dom"), "--dump-dom")


# ------------------------------------------------------------------------------------------
# tests
# ------------------------------------------------------------------------------------------


def test_browser_loads_report_and_shows_sections(dom_run):
    assert dom_run.rc == 0, dom_run.stderr[-2000:]
    dom = dom_run.stdout
    for text in (
        "Batch summary",
        "Geometry by sex",
        "Flagged rows and why",
        "Methods and cautions",
    ):
        assert text in dom
    assert dom.count('class="patient"') == 6
    # the hostile patient id is text in the live DOM, never an element
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in dom
    assert "<script" not in dom.lower()


def test_browser_no_console_messages(dom_run):
    assert console_messages(dom_run.stderr) == []


def test_browser_no_network_requests(dom_run):
    assert dom_run.net_log.exists() and dom_run.net_log.stat().st_size > 0
    assert page_requests(dom_run.net_log) == []


def test_browser_screenshot(report_file, tmp_path):
    shot = tmp_path / "shot.png"
    run = run_chromium(
        report_file,
        tmp_path / "shot",
        f"--screenshot={shot}",
        f"--window-size={WINDOW[0]},{WINDOW[1]}",
    )
    assert run.rc == 0, run.stderr[-2000:]
    data = shot.read_bytes()
    assert len(data) > 20_000  # a page with text and figures, not a blank window
    assert png_size(data) == WINDOW
    assert console_messages(run.stderr) == []
    assert page_requests(run.net_log) == []


def test_browser_detectors_see_a_bad_page(tmp_path):
    """Control: an external image and a console error are both caught (the checks can fail)."""
    page = tmp_path / "bad.html"
    page.write_text(
        "<!DOCTYPE html><html><head><meta charset='utf-8'></head><body><p>bad</p>"
        "<img src='http://127.0.0.1:9/pixel.png'>"
        "<script>console.error('bad page')</script></body></html>",
        encoding="utf-8",
    )
    run = run_chromium(page, tmp_path / "bad", "--dump-dom")
    assert run.rc == 0, run.stderr[-2000:]
    assert any("bad page" in m for m in console_messages(run.stderr))
    assert "http://127.0.0.1:9/pixel.png" in page_requests(run.net_log)


def test_browser_csp_blocks_injected_resource(tmp_path):
    """The report's Content-Security-Policy blocks a network image even if one got in: the
    browser reports the block on the console and makes no request (the second line of defence
    behind escaping)."""
    doc = R.render_report(_analysis())
    doc = doc.replace("</main>", "<img src='http://127.0.0.1:9/leak.png'></main>")
    page = tmp_path / "leak.html"
    page.write_text(doc, encoding="utf-8")
    run = run_chromium(page, tmp_path / "leak", "--dump-dom")
    assert run.rc == 0
    assert page_requests(run.net_log) == []
    assert any("Content Security Policy" in m for m in console_messages(run.stderr))
