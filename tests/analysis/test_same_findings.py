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
