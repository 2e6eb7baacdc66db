"""Alternative lambda methods and the 1065.672 drift correction against outside values."""

import numpy as np
import pytest

from pipeline.balance.driftcor import (
    CalReading,
    drift_correct,
    pre_post,
    readings_from_log,
    validation,
)
from pipeline.balance.methods import afr_spindt, lambda_iso16183, lambda_spindt
from pipeline.fuels import Fuel, load_presets

DIESEL, GASOLINE = Fuel("diesel", 1.80), Fuel("gasoline", 1.85)
# REFERENCES 8 cases A and B: dry CO2, O2, CO, wet THC and the exhaust water (computed test
# vectors [D]).
A = dict(co2=0.09423374, o2=0.08184854, co=1.88156291e-4, thc_wet=4.28706653e-5, w=0.08861585)
B = dict(co2=0.14199325, o2=0.0, co=1.75431833e-2, thc_wet=1.10355358e-4, w=0.13388438)


def test_spindt_reference_vectors():
    # REFERENCES 3 and 8: Spindt AFR 23.1138 (case A) and 13.8404 (case B).
    for fuel, c, expected in ((DIESEL, A, 23.1138), (GASOLINE, B, 13.8404)):
        afr = afr_spindt(fuel, c["co2"], c["o2"], c["co"], c["thc_wet"] / (1 - c["w"]))
        assert afr == pytest.approx(expected, abs=1e-4)


def test_spindt_refuses_oxygenated_fuels():
    # REFERENCES 3: no fuel-oxygen term; not for oxygenated blends.
    assert np.isnan(lambda_spindt(load_presets()["e85"], 0.12, 0.02))


def test_iso16183_reference_vectors():
    # REFERENCES 4.3 and 8: ISO 16183 / R49 lambda 1.59726 (case A) and 0.95059 (case B).
    assert lambda_iso16183(DIESEL, A["co2"], A["co"], A["thc_wet"]) == pytest.approx(
        1.59726, abs=1e-5
    )
    assert lambda_iso16183(GASOLINE, B["co2"], B["co"], B["thc_wet"]) == pytest.approx(
        0.95059, abs=1e-5
    )


def test_drift_correction_1065_672_example():
    # 40 CFR 1065.672 example (REFERENCES 1.10, [V-ex]): refzero 0, refspan 1800.0,
    # prespan 1800.5, postspan 1695.8, prezero 0.6, postzero -5.2, x 435.5 -> 450.2 umol/mol.
    x = drift_correct(435.5, 0.0, 1800.0, 0.6, 1800.5, -5.2, 1695.8)
    assert x == pytest.approx(450.2, abs=0.05)


def test_drift_correction_is_identity_without_drift():
    # Definition: readings equal to the references leave every value unchanged.
    x = np.linspace(0, 0.15, 7)
    np.testing.assert_allclose(drift_correct(x, 0, 0.12, 0, 0.12, 0, 0.12), x)


def test_readings_and_pre_post_from_log_windows():
    t = np.arange(0.0, 1000.0)
    mode = np.zeros_like(t)
    mode[10:200] = 1  # zero window
    mode[200:400] = 2  # span window
    mode[800:990] = 1  # post zero window
    v = np.where(mode == 1, 0.001, np.where(mode == 2, 0.119, 0.1))
    r = readings_from_log(t, v, mode, settle_s=30)
    assert [(x.kind, x.value) for x in r] == [("zero", 0.001), ("span", 0.119), ("zero", 0.001)]
    pre, post = pre_post(t, r, "zero", default_pre=0.0)
    assert pre[500] == 0.001 and post[500] == 0.001
    assert pre[5] == 0.0  # no earlier zero: the reference (1065.672)
    with_post_span = [*r, CalReading("span", 995, 999, 0.118)]
    pre_s, post_s = pre_post(t, with_post_span, "span", 0.12)
    assert pre_s[500] == 0.119 and post_s[500] == 0.118
    assert np.isnan(pre_post(t, r, "span", 0.12)[1][500])  # no post span: cannot correct


def test_validation_four_percent():
    # 1065.550 (REFERENCES 1.10, [M]): within +-4 % of the uncorrected result passes.
    assert validation(100.0, 103.9)[1] and not validation(100.0, 104.1)[1]
