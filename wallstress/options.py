"""Options of one analysis run. Every option lands in the methods record."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field


@dataclass(frozen=True)
class Options:
    """How a study list is analysed.

    Parameters
    ----------
    reference : str
        Name of a bundled reference set (``wallstress references`` lists them) or a path to a
        lab's own set CSV (e.g. from ``wallstress calibrate``).
    bsa_method : str
        Body surface area formula: ``dubois`` (default), ``mosteller``, ``haycock``,
        ``gehan_george`` or ``boyd``.
    mass_method : str
        LV mass from linear dimensions: ``ase_corrected`` (default) or ``penn``; or a 2D method,
        ``area_length`` or ``truncated_ellipsoid``, used where the area columns are present
        (rows without them fall back to the linear method, with a flag).
    rwt_method : str
        ``posterior`` (2 PWd / LVIDd, default) or ``septal_posterior`` ((IVSd + PWd) / LVIDd).
    es_pressure : str
        End-systolic pressure: ``cuff_sbp`` (default), ``scaled_sbp`` (0.9 SBP),
        ``weighted_mean`` ((2 SBP + DBP) / 3) or ``measured`` (the es_pressure_measured_mmhg column).
    stress_constant : str
        ``published`` (0.334 and 1.35, as in the source papers, default) or ``exact``
        (the exact mmHg -> kdyn/cm2 factor, 1.333224; meridional 0.21 % and circumferential 1.24 % lower).
    units : str
        Units of linear dimensions when the header does not say: ``auto`` (inferred per column
        from plausible ranges, with a finding), ``mm`` or ``cm``.
    date_order : str
        How dates such as 04/03/2021 are read: ``auto`` (by the column's unambiguous dates;
        day-first, with a column finding, when none shows the order), ``dmy`` or ``mdy``.
    columns : dict
        The lab's own header -> canonical field name (``--columns`` file).
    sheet : str or None
        Sheet to read from a workbook (default: first sheet whose headers are recognised).
    """

    reference: str = "ase_eacvi_2015"
    bsa_method: str = "dubois"
    mass_method: str = "ase_corrected"
    rwt_method: str = "posterior"
    es_pressure: str = "cuff_sbp"
    stress_constant: str = "published"
    units: str = "auto"
    date_order: str = "auto"
    columns: dict = field(default_factory=dict)
    sheet: str | None = None

    def as_record(self) -> dict:
        """The options as a plain dict for the methods record."""
        return asdict(self)
