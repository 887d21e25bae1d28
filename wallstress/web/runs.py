"""Each upload is one run: its own id, its own private folder, its job on a worker thread.

A run reads the uploaded study list and writes what ``wallstress analyse`` writes for it, the HTML
report and, when patients have several studies, the follow-up workbook, by calling the same job
functions as the command line. The browser names a run by its random id and a download by a key
of the run's own list: no path from the browser ever reaches the file system. Every run folder
lives under one temporary root (mode 0700) that is removed when the server stops; a run's folder
is removed when the user deletes it or when it expires.
"""

from __future__ import annotations

import re
import secrets
import shutil
import sys
import tempfile
import threading
import time
import traceback
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

from wallstress.errors import UNEXPECTED, describe
from wallstress.jobs import analyse_file, default_output, report_file, track_file
from wallstress.options import Options
from wallstress.read.studies import STUDY_LIST_SUFFIXES
from wallstress.tracking.track import is_longitudinal, track

EXPIRE_SECONDS = 4 * 3600
MAX_RUNS = 50


@dataclass
class Run:
    """One upload and its job. ``state`` is ``waiting``, ``working``, ``done`` or ``failed``."""

    id: str
    folder: Path
    upload_name: str
    options: Options
    state: str = "waiting"
    step: str = "waiting for a free worker"
    message: str = ""
    summary: dict = field(default_factory=dict)
    downloads: dict[str, Path] = field(default_factory=dict)
    started: float = field(default_factory=time.time)
    touched: float = field(default_factory=time.time)


def safe_name(name: str) -> str:
    """The uploaded file's name, reduced to a plain file name (no folders, no odd characters) that
    keeps its extension; raises ValueError for a format the page does not take."""
    base = re.split(r"[\\/]", str(name or ""))[-1].strip()
    stem, dot, suffix = base.rpartition(".")
    suffix = f".{suffix.lower()}" if dot else ""
    if suffix not in STUDY_LIST_SUFFIXES:
        raise ValueError(
            f"{base or 'the file'}: not a study list this page reads; choose an .xlsx, .ods, .csv "
            "or .parquet file"
        )
    stem = re.sub(r"[^A-Za-z0-9_.-]+", "_", stem).strip("._")[:80] or "studies"
    return stem + suffix


class Runs:
    """The runs of one server: started, looked up by id, removed; files under one private root."""

    def __init__(self, root: Path | None = None, workers: int = 2):
        self.root = Path(tempfile.mkdtemp(prefix="wallstress-serve-", dir=root))
        self.root.chmod(0o700)
        self._runs: dict[str, Run] = {}
        self._lock = threading.Lock()
        self._pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="wallstress-run")

    def start(self, upload_name: str, data: bytes, options: Options) -> Run:
        name = safe_name(upload_name)
        self._expire()
        run_id = secrets.token_urlsafe(16)
        folder = self.root / run_id
        (folder / "input").mkdir(parents=True, mode=0o700)
        (folder / "results").mkdir(mode=0o700)
        src = folder / "input" / name
        src.write_bytes(data)
        run = Run(run_id, folder, name, options)
        with self._lock:
            self._runs[run_id] = run
        self._pool.submit(self._work, run, src)
        return run

    def start_cohort(self, store: Path, options: Options) -> Run:
        """A run over the clinic's cohort store named when the server was started (read only;
        the browser names no path)."""
        self._expire()
        run_id = secrets.token_urlsafe(16)
        folder = self.root / run_id
        (folder / "results").mkdir(parents=True, mode=0o700)
        run = Run(run_id, folder, Path(store).name, options)
        with self._lock:
            self._runs[run_id] = run
        self._pool.submit(self._work_cohort, run, Path(store))
        return run

    def _work_cohort(self, run: Run, store: Path) -> None:
        from wallstress.follow_up import cohort_status, track_sources
        from wallstress.web.summary import summarise

        run.state = "working"
        try:
            run.step = "reading the store and following every patient"
            result = track_sources(
                [store], run.folder / "results" / f"{store.stem}.followup.xlsx", run.options
            )
            for path in result.written:
                run.downloads[path.name] = path
            run.step = "summarising"
            run.summary = summarise(result, result.tracking, run.options)
            run.summary["notes"] = result.notes
            status = cohort_status(store)
            run.summary["imports"] = [
                (
                    str(r.imported_utc),
                    str(r.file_name),
                    int(r.rows),
                    int(r.new_studies),
                    int(r.conflicts),
                )
                for r in status["imports"].itertuples(index=False)
            ]
            run.summary["open_proposals"] = len(status["proposals"])
            run.state = "done"
        except Exception as exc:
            self._failed(run, exc, folder=None)

    def _failed(self, run: Run, exc: Exception, folder: Path | None) -> None:
        message, code = describe(exc)
        if code == UNEXPECTED:
            traceback.print_exc(file=sys.stderr)
            message += "; the terminal that runs 'wallstress serve' shows the details"
        run.message = message.replace(str(folder) + "/", "") if folder else message
        run.state = "failed"

    def get(self, run_id: str) -> Run | None:
        with self._lock:
            run = self._runs.get(run_id)
        if run is not None:
            run.touched = time.time()
        return run

    def delete(self, run_id: str) -> bool:
        with self._lock:
            run = self._runs.pop(run_id, None)
        if run is None:
            return False
        shutil.rmtree(run.folder, ignore_errors=True)
        return True

    def close(self) -> None:
        """Stop taking work and remove every run's files (the server is stopping)."""
        self._pool.shutdown(wait=False, cancel_futures=True)
        with self._lock:
            self._runs.clear()
        shutil.rmtree(self.root, ignore_errors=True)

    def _expire(self) -> None:
        now = time.time()
        with self._lock:
            old = [r.id for r in self._runs.values() if now - r.touched > EXPIRE_SECONDS]
            finished = sorted(
                (r for r in self._runs.values() if r.state in ("done", "failed")),
                key=lambda r: r.touched,
            )
            extra = len(self._runs) - MAX_RUNS + 1
            old += [r.id for r in finished[: max(0, extra)]]
        for run_id in dict.fromkeys(old):
            self.delete(run_id)

    def _work(self, run: Run, src: Path) -> None:
        from wallstress.web.summary import summarise

        run.state = "working"
        out = run.folder / "results"
        try:
            run.step = "reading the study list and computing every measure"
            results = analyse_file(src, out / default_output(src).name, run.options)
            for path in results.written:
                run.downloads[path.name] = path
            run.step = "drawing the report"
            report = report_file(src, out / f"{src.stem}.report.html", run.options)
            run.downloads[report.name] = report
            followup = None
            if is_longitudinal(results.analysis.canonical):
                run.step = "following patients over time"
                followup = track(results.analysis, run.options)
                written = track_file(src, out / f"{src.stem}.followup.xlsx", run.options)
                for path in written.written:
                    run.downloads[path.name] = path
            run.step = "summarising"
            run.summary = summarise(results, followup, run.options)
            run.summary["notes"] = results.notes
            run.state = "done"
        except Exception as exc:  # the page shows one message; the server keeps running
            self._failed(run, exc, folder=run.folder / "input")
