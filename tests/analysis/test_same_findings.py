"""The findings of a mixed corpus are the same, value for value, as those stored from a commit
whose findings were checked (tests/mixed_corpus.py says how they were made). Guards the fast paths
for text ids, text dates and many flagged rows against any change of behaviour."""

import pandas as pd

from tests.mixed_corpus import GOLDEN, findings_of_corpus


def test_findings_of_the_mixed_corpus_are_unchanged():
    stored = pd.read_csv(GOLDEN, dtype=str, keep_default_na=False)
    now = findings_of_corpus().reset_index(drop=True)
    assert list(now.columns) == list(stored.columns)
    assert len(now) == len(stored)
    pd.testing.assert_frame_equal(now, stored, check_dtype=False)


def test_threads_change_nothing(monkeypatch):
    """Columns read in threads and the measures computed in row partitions (forced here on these
    short lists) give the same findings, in the same order."""
    from wallstress.analysis import pipeline
    from wallstress.prepare import mapping

    monkeypatch.setattr(mapping, "PARALLEL_MIN_ROWS", 1)
    monkeypatch.setattr(pipeline, "PARTITION_MIN_ROWS", 50)
    monkeypatch.setenv(pipeline.THREADS_ENV, "3")
    stored = pd.read_csv(GOLDEN, dtype=str, keep_default_na=False)
    now = findings_of_corpus().reset_index(drop=True)
    pd.testing.assert_frame_equal(now, stored, check_dtype=False)


def test_one_thread_means_one_thread(monkeypatch):
    """WALLSTRESS_THREADS=1 (the README's advice inside a dask worker) starts no thread, however
    long the list (forced here by lowering the thresholds), and gives the same findings."""
    from wallstress.analysis import pipeline
    from wallstress.prepare import mapping

    def refuse(*args, **kwargs):
        raise AssertionError("a thread pool was started with WALLSTRESS_THREADS=1")

    monkeypatch.setattr(mapping, "PARALLEL_MIN_ROWS", 1)
    monkeypatch.setattr(pipeline, "PARTITION_MIN_ROWS", 1)
    monkeypatch.setattr(mapping, "ThreadPoolExecutor", refuse)
    monkeypatch.setattr(pipeline, "ThreadPoolExecutor", refuse)
    monkeypatch.setenv(pipeline.THREADS_ENV, "1")
    stored = pd.read_csv(GOLDEN, dtype=str, keep_default_na=False)
    now = findings_of_corpus().reset_index(drop=True)
    pd.testing.assert_frame_equal(now, stored, check_dtype=False)
