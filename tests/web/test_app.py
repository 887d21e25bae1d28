"""Routes of ``wallstress serve`` with Starlette's test client: the page runs the same jobs as the
command line, refuses what it must, and never shows a stack trace.

The expected results (sheets of the written workbook, the CLI's message for a bad file) come from
the command-line jobs themselves: the page must say and write what they say and write.
"""

from __future__ import annotations

import io
import re
import time
from pathlib import Path

import openpyxl
import pytest
from starlette.testclient import TestClient

from tests.hostile_files import random_xlsx, zip_bomb_ratio
from wallstress.errors import describe
from wallstress.jobs import sample_dir
from wallstress.read.studies import read_studies
from wallstress.web.app import CSP, CSRF_COOKIE, create_app
from wallstress.web.runs import safe_name

SAMPLE = sample_dir() / "fernhill_echo_lab.xlsx"
FOLLOWUP = sample_dir() / "fernhill_followup.xlsx"
BASE = "http://127.0.0.1"


@pytest.fixture(scope="module")
def client(tmp_path_factory):
    app = create_app(runs_root=tmp_path_factory.mktemp("runs"), max_upload_mb=5)
    with TestClient(app, base_url=BASE) as c:
        c.runs_root = app.state.runs.root
        c.done = {}  # finished runs shared by the tests (each run takes seconds)
        yield c


def _run_of(client, path: Path) -> tuple[str, str]:
    """(url, finished page) of a run of ``path``, made once per module."""
    if path not in client.done:
        url = _send(client, path).headers["location"]
        client.done[path] = (url, _finished(client, url))
    return client.done[path]


def _token(client) -> str:
    page = client.get("/")
    return re.search(r'name="csrf" value="([^"]+)"', page.text).group(1)


def _send(client, path: Path, name=None, **fields):
    token = _token(client)
    files = {"studies": (name or path.name, path.read_bytes())}
    return client.post("/runs", data={"csrf": token, **fields}, files=files, follow_redirects=False)


def _finished(client, url: str, timeout=120) -> str:
    end = time.time() + timeout
    while time.time() < end:
        page = client.get(url)
        if 'id="progress"' not in page.text:
            return page.text
        time.sleep(0.2)
    raise AssertionError("the run did not finish")


def test_start_page_has_form_defaults_cautions_and_headers(client):
    page = client.get("/")
    assert page.status_code == 200
    assert page.headers["content-security-policy"] == CSP
    assert "default-src 'none'" in CSP and "http" not in CSP  # nothing from elsewhere
    assert page.headers["x-content-type-options"] == "nosniff"
    assert "supports, and never replaces" in page.text
    assert 'value="dubois" selected' in page.text and "(default)" in page.text
    assert CSRF_COOKIE in page.cookies
    # every asset the page names is ours (no CDN): relative /static links only
    assert not re.search(r'(src|href)="(https?:)?//', page.text)


def test_the_sample_workbook_runs_like_the_cli(client):
    url, text = _run_of(client, SAMPLE)
    assert 'id="summary"' in text and 'id="plane"' in text and "data:image/png;base64," in text
    assert "Key measures" in text and "LVMI/BSA (g/m2)" in text
    assert "concentric hypertrophy" in text or "normal" in text  # classes in words
    assert "Unverified values in use" in text and "supports, and never replaces" in text
    links = re.findall(r'href="(/runs/[^"]+/files/[^"]+)"', text)
    names = [link.rsplit("/", 1)[1] for link in links]
    assert any(n.endswith(".xlsx") and "report" not in n for n in names)
    assert any(n.endswith(".html") for n in names)
    results = next(link for link in links if link.endswith(".xlsx"))
    got = client.get(results)
    assert got.status_code == 200
    book = openpyxl.load_workbook(io.BytesIO(got.content), read_only=True)
    user_sheets = openpyxl.load_workbook(SAMPLE, read_only=True).sheetnames
    assert book.sheetnames[: len(user_sheets)] == user_sheets  # the user's own sheets first
    assert len(book.sheetnames) > len(user_sheets)  # ours added


def test_follow_up_list_shows_patients_and_verdicts(client):
    _, text = _run_of(client, FOLLOWUP)
    assert 'id="patients"' in text and "Verdicts" in text


def test_a_hostile_file_gives_the_cli_message_and_the_server_goes_on(client, tmp_path):
    for bad in (random_xlsx(tmp_path), zip_bomb_ratio(tmp_path)):
        with pytest.raises(Exception) as cli_error:
            read_studies(bad)
        expected, _ = describe(cli_error.value)
        text = _finished(client, _send(client, bad).headers["location"])
        assert 'id="message"' in text
        shown = re.search(r'id="message">([^<]*)<', text).group(1)
        assert expected.split(bad.name)[-1][:40].strip() in shown.replace("&#39;", "'")
        assert "Traceback" not in text and str(tmp_path) not in shown
    assert client.get("/").status_code == 200


def test_form_without_token_or_from_elsewhere_is_refused(client):
    files = {"studies": ("s.xlsx", SAMPLE.read_bytes())}
    assert client.post("/runs", files=files, data={}).status_code == 403
    token = _token(client)
    other = client.post(
        "/runs", files=files, data={"csrf": token}, headers={"origin": "http://evil.example"}
    )
    assert other.status_code == 403
    wrong = client.post("/runs", files=files, data={"csrf": "not-the-token"})
    assert wrong.status_code == 403 and "Traceback" not in wrong.text


def test_upload_limit_choice_values_and_formats(client, tmp_path):
    big = tmp_path / "big.csv"
    big.write_bytes(b"a,b\n" + b"1,2\n" * (2 * 2**20))  # 8 MiB > the 5 MB limit
    too_big = _send(client, big)
    assert too_big.status_code == 413 and "larger than this page takes" in too_big.text
    odd = _send(client, SAMPLE, bsa_method="made_up")
    assert odd.status_code == 400 and "not one of the choices" in odd.text
    exe = tmp_path / "tool.exe"
    exe.write_bytes(b"MZ")
    assert _send(client, exe).status_code == 400


def test_no_path_from_the_browser_reaches_the_disk(client):
    url, _ = _run_of(client, SAMPLE)
    for name in ("../../../etc/passwd", "..%2F..%2Fetc%2Fpasswd", "input"):
        assert client.get(f"{url}/files/{name}").status_code == 404
    assert client.get("/runs/not-a-run").status_code == 404
    assert safe_name("../../x/../studies list.csv") == "studies_list.csv"
    assert safe_name("C:\\Users\\a\\lab.XLSX") == "lab.xlsx"


def test_two_runs_do_not_mix_and_delete_removes_files(client):
    a, ta = _run_of(client, SAMPLE)
    b, tb = _run_of(client, FOLLOWUP)
    assert a != b
    assert "fernhill_echo_lab" in ta and "fernhill_followup" not in ta
    assert "fernhill_followup" in tb and 'id="patients"' in tb
    run_id = b.rsplit("/", 1)[1]
    assert (client.runs_root / run_id).is_dir()
    client.post(f"{b}/delete", data={"csrf": _token(client)})
    assert not (client.runs_root / run_id).exists()
    assert client.get(b).status_code == 404
    client.done.pop(FOLLOWUP)


def test_other_host_names_are_refused(client):
    assert client.get("/", headers={"host": "rebind.example"}).status_code == 400


def test_files_removed_when_the_server_stops(tmp_path):
    app = create_app(runs_root=tmp_path)
    with TestClient(app, base_url=BASE) as c:
        root = app.state.runs.root
        bad = tmp_path / "bad.csv"
        bad.write_text("nothing,here\n1,2\n")  # quick to fail: the folder is made all the same
        _finished(c, _send(c, bad).headers["location"])
        assert any(root.iterdir())
    assert not root.exists()


def test_serve_command_checks_its_options_and_address(monkeypatch):
    import socket

    from typer.testing import CliRunner

    from wallstress.cli import app
    from wallstress.web import server

    runner = CliRunner()
    bad = runner.invoke(app, ["serve", "--port", "80", "--no-browser"])
    assert bad.exit_code == 2 and "1024" in bad.output
    assert server.is_loopback("127.0.0.1") and server.is_loopback("::1")
    assert not server.is_loopback("0.0.0.0") and not server.is_loopback("192.168.1.20")
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        busy = runner.invoke(app, ["serve", "--port", str(port), "--no-browser"])
    assert busy.exit_code == 1 and "in use" in busy.output and "--port" in busy.output


def test_a_cohort_store_named_at_start_shows_its_patients(tmp_path):
    """``serve --store``: the page follows the store's patients (the same job as ``track``) and
    lists what went in; the browser names no path."""
    from tests.cohort.clinic import write_exports
    from wallstress.follow_up import cohort_add
    from wallstress.options import Options

    write_exports(tmp_path / "exports")
    store = tmp_path / "clinic.duckdb"
    cohort_add(store, [tmp_path / "exports"], Options())
    app = create_app(runs_root=tmp_path, store=store)
    with TestClient(app, base_url=BASE) as c:
        page = c.get("/")
        assert "clinic.duckdb" in page.text and 'id="follow"' in page.text
        token = re.search(r'name="csrf" value="([^"]+)"', page.text).group(1)
        sent = c.post("/cohort", data={"csrf": token}, follow_redirects=False)
        assert sent.status_code == 303
        text = _finished(c, sent.headers["location"])
        assert 'id="patients"' in text and 'id="imports"' in text
        assert "brookvale_echo_2025.csv" in text
        assert "identifiers look like another patient" in text  # the map is not applied
        assert re.search(r'files/clinic\.followup\.xlsx"', text)
    with TestClient(create_app(runs_root=tmp_path), base_url=BASE) as c:
        token = re.search(r'name="csrf" value="([^"]+)"', c.get("/").text).group(1)
        assert c.post("/cohort", data={"csrf": token}).status_code == 404
