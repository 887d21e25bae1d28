"""The result of one analysis run: what the pipeline hands to writers, tracking, figures and report."""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd


@dataclass
class Analysis:
    """Everything one run produced.

    Attributes
    ----------
    table : DataFrame
        The user's columns, unchanged and in their order, followed by the output columns
        (``schema.OUTPUT_COLUMNS``). One row per input row, same order. This is what is written.
    canonical : DataFrame
        The mapped inputs under canonical names in internal units (cm, kg, mmHg, mL, ms), same index.
        Values found impossible by validation are NaN here.
    outputs : DataFrame
        The output columns alone, same index.
    findings : DataFrame
        One row per finding (``wallstress.findings.FINDING_COLUMNS``).
    methods : dict
        The methods record: software, options, reference set with sources, formulas, column mapping,
        counts, unverified values used, cautions. Writers add the input file and its hash.
    """

    table: pd.DataFrame
    canonical: pd.DataFrame
    outputs: pd.DataFrame
    findings: pd.DataFrame
    methods: dict = field(default_factory=dict)

    def frame(self) -> pd.DataFrame:
        """Canonical inputs and outputs side by side, under canonical names (for tracking, figures)."""
        return pd.concat([self.canonical, self.outputs], axis=1)

    @property
    def n_rows(self) -> int:
        return len(self.table)
