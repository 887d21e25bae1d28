"""Body size formulas against their published equations.

The check values are recomputed here from each paper's equation written out with ``math`` (logs and
exponentials), independently of the implementation's power expressions.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from wallstress.formulas import BSA_METHODS, bsa_m2, height_power


def test_bsa_m2_mosteller_vs_mosteller_1987():
    """Mosteller RD, N Engl J Med 1987;317:1098: BSA = sqrt(H W / 3600).

    180 cm, 80 kg: 180 * 80 = 14400; 14400 / 3600 = 4; sqrt(4) = 2.0000 m2 exactly (computed).
    """
    assert bsa_m2(180.0, 80.0, method="mosteller") == pytest.approx(2.0, abs=5e-5)
    # 160 cm, 56.25 kg: 9000 / 3600 = 2.5, sqrt = 1.58114 m2 (computed).
    assert bsa_m2(160.0, 56.25, method="mosteller") == pytest.approx(1.58114, abs=5e-6)


def test_bsa_m2_dubois_vs_dubois_1916():
    """DuBois D, DuBois EF, Arch Intern Med 1916;17:863: BSA = 0.007184 W^0.425 H^0.725.

    Recomputed as exp(ln 0.007184 + 0.425 ln W + 0.725 ln H) (computed, not printed in the paper).
    """
    for h, w in [(180.0, 80.0), (152.0, 45.0), (195.0, 120.0)]:
        expected = math.exp(math.log(0.007184) + 0.425 * math.log(w) + 0.725 * math.log(h))
        assert bsa_m2(h, w, method="dubois") == pytest.approx(expected, rel=1e-12)
    # 180 cm / 80 kg by hand: 80^0.425 = 6.4394, 180^0.725 = 43.159, product * 0.007184 = 1.9964.
    assert bsa_m2(180.0, 80.0) == pytest.approx(1.9964, abs=5e-4)


def test_bsa_m2_haycock_vs_haycock_1978():
    """Haycock GB et al., J Pediatr 1978;93:62: BSA = 0.024265 H^0.3964 W^0.5378 (computed)."""
    for h, w in [(180.0, 80.0), (110.0, 19.0), (50.0, 3.5)]:
        expected = math.exp(math.log(0.024265) + 0.3964 * math.log(h) + 0.5378 * math.log(w))
        assert bsa_m2(h, w, method="haycock") == pytest.approx(expected, rel=1e-12)


def test_bsa_m2_gehan_george_vs_gehan_george_1970():
    """Gehan EA, George SL, Cancer Chemother Rep 1970;54:225: 0.0235 H^0.42246 W^0.51456."""
    for h, w in [(180.0, 80.0), (165.0, 62.0)]:
        expected = math.exp(math.log(0.0235) + 0.42246 * math.log(h) + 0.51456 * math.log(w))
        assert bsa_m2(h, w, method="gehan_george") == pytest.approx(expected, rel=1e-12)


def test_bsa_m2_boyd_vs_boyd_1935():
    """Boyd E, The Growth of the Surface Area of the Human Body, 1935: weight in grams,
    BSA = 0.0003207 H^0.3 Wg^(0.7285 - 0.0188 log10 Wg).

    180 cm, 80 kg by hand: Wg = 80000, log10 Wg = 4.90309, exponent = 0.7285 - 0.092178 = 0.636322;
    Wg^0.636322 = 10^(4.90309 * 0.636322) = 10^3.119946 = 1318.2; 180^0.3 = 4.7489;
    0.0003207 * 4.7489 * 1318.2 = 2.0075 m2 (computed). Weight in kg instead of g would give ~0.02.
    """
    assert bsa_m2(180.0, 80.0, method="boyd") == pytest.approx(2.0075, abs=5e-4)
    wg = 62_000.0
    expo = 0.7285 - 0.0188 * math.log10(wg)
    expected = 0.0003207 * 165.0**0.3 * 10 ** (expo * math.log10(wg))
    assert bsa_m2(165.0, 62.0, method="boyd") == pytest.approx(expected, rel=1e-12)


def test_bsa_m2_methods_agree_for_average_adult_vs_common_practice():
    """The five adult formulas agree within about 2 % for an average adult (common practice, no
    source): a unit slip (grams vs kg, m vs cm) in any one of them would break this."""
    values = np.array([bsa_m2(175.0, 75.0, method=m) for m in BSA_METHODS])
    assert values.max() / values.min() < 1.02


def test_height_power_vs_de_simone_1992():
    """de Simone G et al., J Am Coll Cardiol 1992;20:1251: LV mass indexed by height in metres to
    the 2.7 power. 170 cm: 1.7^2.7 = exp(2.7 * ln 1.7) = exp(1.432696) = 4.18998 m^2.7 (computed)."""
    assert height_power(170.0, 2.7) == pytest.approx(4.18998, abs=5e-6)
    assert height_power(170.0, 1.7) == pytest.approx(math.exp(1.7 * math.log(1.7)), rel=1e-12)
    assert height_power(170.0, 1) == pytest.approx(1.7, rel=1e-12)


def test_height_power_bad_power_raises():
    """A power that is not a real number is a wrong call (common practice, no source)."""
    with pytest.raises(ValueError, match="power"):
        height_power(170.0, "2.7")
    with pytest.raises(ValueError, match="finite"):
        height_power(170.0, float("nan"))


def test_bsa_m2_bad_method_lists_valid_names():
    """An unknown method name raises and lists the valid names (common practice, no source)."""
    with pytest.raises(ValueError, match=r"dubois.*mosteller.*haycock.*gehan_george.*boyd"):
        bsa_m2(170.0, 70.0, method="du_bois")


def test_bsa_m2_invalid_inputs_give_nan():
    """Zero, negative, NaN and inf height or weight give NaN, not a number or an error."""
    out = bsa_m2(np.array([0.0, -170.0, np.nan, np.inf, 170.0]), 70.0)
    assert np.isnan(out[:4]).all()
    assert np.isfinite(out[4])


def test_bsa_m2_series_keeps_index():
    """A Series in gives a Series out with the same index."""
    h = pd.Series([170.0, 180.0], index=["a", "b"])
    w = pd.Series([70.0, 90.0], index=["a", "b"])
    out = bsa_m2(h, w)
    assert isinstance(out, pd.Series)
    assert list(out.index) == ["a", "b"]


def test_bsa_m2_mismatched_series_index_raises():
    """Two Series with different indexes would pair the wrong rows: a wrong call."""
    with pytest.raises(ValueError, match="reindex"):
        bsa_m2(pd.Series([170.0], index=[0]), pd.Series([70.0], index=[1]))
