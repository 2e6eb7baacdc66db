"""Checks stage on constructed arrays: settings, alignment, steady points, residuals,
disagreement, drift, attribution, data-quality flags, invariance.

The nights here are invented (fault-injection data): steady plateaus joined by ramps, lambda
estimates with noise and a known fault in one of them. Published values used are named
beside their checks.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.signal import lfilter

from pipeline.align import align_analyzers, cross_correlation_delay
from pipeline.checks import run_checks
from pipeline.checks.attribution import attribute
from pipeline.checks.drift import cusum_alarm
from pipeline.checks.residuals import carbon_fuel_flow, relative_residual
from pipeline.checks.settings import DEFAULTS, resolve_settings
from pipeline.checks.timebase import hysteresis, mask_runs
from pipeline.checks.verdicts import console_lines
from pipeline.constants import MAD_TO_SIGMA
from pipeline.errors import ConfigError

AFR = 14.5  # stoichiometric air/fuel ratio of a CH1.8 fuel, about 14.5 (REFERENCES 5)
SUSPECT = {
    "co2": "co2",
    "o2": "o2",
    "air": "air_mass_flow|fuel_mass_flow",
    "fuel": "air_mass_flow|fuel_mass_flow",
    "sensor": "lambda_sensor",
}


def _lean_exhaust(lam: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Dry CO2 and O2 of CH1.8 burnt lean and complete: 1.45 mol O2 per mol C (law of
    chemistry), air N2+Ar/O2 = 3.774 (REFERENCES 1.2)."""
    lam = np.maximum(lam, 1.0)
    dry = 1.0 + 1.45 * (lam - 1) + 1.45 * lam * 3.774
    return 1.0 / dry, 1.45 * (lam - 1) / dry


def make_night(
    seed: int = 0,
    hours: float = 6.0,
    fuel: str = "diesel",
    noise: float = 0.01,
    point_bias: float = 0.003,
    delay: float = 8.0,
    tau: float = 1.0,
    fault: str | None = None,
    kind: str = "ramp",
    size: float = 0.04,
    onset_h: float = 3.0,
    ramp_h: float = 1.0,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(frame, derived) of an invented night at 1 Hz with an optional fault.

    Faults act on the lambda estimates as the physics notes of the checks say: a CO2 gain g
    gives lambda_carbon / g and moves lambda_oxygen by (1 - 1/lambda) of that; an O2 fault
    moves lambda_oxygen; an air (fuel) meter gain moves lambda_flow up (down).
    """
    rng = np.random.default_rng(seed)
    t = np.arange(0.0, hours * 3600.0)
    knots, sp, tq = [], [], []
    t0 = 0.0
    while t0 < t[-1]:
        ramp, hold = rng.uniform(10, 60), rng.uniform(240, 600)
        s, q = rng.uniform(1000, 3000), rng.uniform(40, 400)
        knots += [t0 + ramp, t0 + ramp + hold]
        sp += [s, s]
        tq += [q, q]
        t0 += ramp + hold
    speed = np.interp(t, knots, sp)
    torque = np.interp(t, knots, tq)
    n = t.size
    fuel_true = 0.5 + speed * torque / 1.2e6 * 40.0
    lam = 1.3 + 1.5 * (1 - torque / 400.0) if fuel == "diesel" else np.where(torque > 330, 0.9, 1.0)
    co2, o2 = _lean_exhaust(lam)
    a = 1.0 / (tau + 1.0)

    def analyzer(x: np.ndarray) -> np.ndarray:
        return lfilter([a], [1, a - 1], np.interp(t - delay, t, x), zi=[x[0] * (1 - a)])[0]

    frame = pd.DataFrame(
        {
            "time": t,
            "speed": speed * (1 + 0.002 * rng.standard_normal(n)),
            "torque": torque * (1 + 0.01 * rng.standard_normal(n)),
            "fuel_mass_flow": fuel_true * (1 + 0.005 * rng.standard_normal(n)),
            "air_mass_flow": fuel_true * lam * AFR * (1 + 0.005 * rng.standard_normal(n)),
            "co2": analyzer(co2) * (1 + 0.003 * rng.standard_normal(n)),
            "o2": analyzer(o2) + 2e-4 * rng.standard_normal(n),
        }
    )
    key = np.unique(np.round(speed), return_inverse=True)[1]

    def estimate() -> np.ndarray:
        bias = point_bias * rng.standard_normal(key.max() + 1)[key]
        return lam * (1 + bias + noise * rng.standard_normal(n))

    lf, lc, lo, ls = estimate(), estimate(), estimate(), estimate()
    if fault:
        if kind == "ramp":
            e = size * np.clip((t - onset_h * 3600) / (ramp_h * 3600), 0, 1)
        else:
            e = size * (t >= onset_h * 3600)
        if fault == "co2":
            lc = lc / (1 - e)
            lo = lo * (1 + np.maximum(0, 1 - 1 / lam) * (1 / (1 - e) - 1))
        elif fault == "o2":
            lo = lo * (1 + e)
        elif fault == "air":
            lf = lf * (1 + e)
        elif fault == "fuel":
            lf = lf / (1 + e)
        elif fault == "sensor":
            ls = ls * (1 + e)
    frame["lambda_sensor"] = ls
    derived = pd.DataFrame(
        {"lambda_flow": lf, "lambda_carbon": lc, "lambda_oxygen": lo, "valid": 1.0, "sampling": 1.0}
    )
    return frame, derived


def _judged_flags(result) -> pd.DataFrame:
    return result.flags[result.flags["check"].isin(["drift", "lambda_disagreement"])]


# --- settings --------------------------------------------------------------------------------
def test_unknown_checks_key_names_the_nearest() -> None:
    with pytest.raises(ConfigError, match='Did you mean "drift_cusum_h"'):
        resolve_settings({"drift_cusum_hh": 5})


def test_checks_key_must_be_a_number() -> None:
    with pytest.raises(ConfigError, match="must be a number"):
        resolve_settings({"steady_window_s": "long"})


def test_override_is_used_and_recorded() -> None:
    frame, derived = make_night(hours=2.0)
    res = run_checks(frame, derived, {"disagreement_tolerance": 0.07}, has_sensor=True)
    assert res.attrs["disagreement_tolerance"] == 0.07
    assert set(DEFAULTS) <= set(res.attrs)


# --- helpers ---------------------------------------------------------------------------------
def test_hysteresis_gives_one_interval_for_noise_around_the_limit() -> None:
    rng = np.random.default_rng(1)
    x = np.concatenate([np.zeros(100), 1.0 + 0.05 * rng.standard_normal(500), np.zeros(100)])
    naive = mask_runs(x > 1.0)
    latched = mask_runs(hysteresis(x, 1.0, 0.7))
    assert len(naive) > 20
    assert len(latched) == 1


def test_mad_factor_is_the_normal_quartile() -> None:
    """1.4826 = 1 / Phi^-1(3/4), the consistency factor of the MAD (common statistics)."""
    assert MAD_TO_SIGMA == pytest.approx(1.0 / stats.norm.ppf(0.75), rel=1e-4)


@pytest.mark.parametrize(("shift", "published_arl"), [(1.0, 10.4), (2.0, 4.01)])
def test_cusum_run_length_matches_published_table(shift: float, published_arl: float) -> None:
    """Average run length of the tabular CUSUM with k = 1/2, h = 5 after a mean shift:
    10.4 (1 sigma) and 4.01 (2 sigma); Montgomery, Introduction to Statistical Quality
    Control, table of CUSUM ARL performance (values from memory, [M])."""
    rng = np.random.default_rng(0)
    runs = [cusum_alarm(rng.standard_normal(200) + shift, 0.5, 5.0) + 1 for _ in range(3000)]
    assert np.mean(runs) == pytest.approx(published_arl, rel=0.08)


def test_residual_and_carbon_fuel_flow_definitions() -> None:
    lam_flow, lam_carbon, fuel = np.array([1.5, 2.0]), np.array([1.56, 1.9]), np.array([10.0, 4.0])
    np.testing.assert_allclose(relative_residual(lam_carbon, lam_flow), [0.04, -0.05])
    # m_air / (lambda_carbon AFR_st) with m_air = lambda_flow m_fuel AFR_st
    air = lam_flow * fuel * AFR
    np.testing.assert_allclose(
        carbon_fuel_flow(fuel, lam_flow, lam_carbon), air / (lam_carbon * AFR)
    )
    assert np.isnan(relative_residual(np.array([1.0]), np.array([0.0])))[0]


# --- alignment -------------------------------------------------------------------------------
def test_cross_correlation_finds_a_subsample_delay() -> None:
    rng = np.random.default_rng(3)
    x = np.convolve(rng.standard_normal(4000), np.ones(20) / 20, mode="same")
    t = np.arange(x.size) * 0.5
    y = np.interp(t - 7.3, t, x)
    d, q = cross_correlation_delay(np.gradient(x), np.gradient(y), 0.5, 40.0)
    assert d == pytest.approx(7.3, abs=0.15)
    assert q > 0.8


@pytest.mark.parametrize(("delay", "tau", "seed"), [(5.0, 0.5, 1), (8.0, 1.0, 2), (12.5, 1.5, 3)])
def test_alignment_recovers_the_delay(delay: float, tau: float, seed: int) -> None:
    """Transport delay plus a first-order response tau: the delay to remove is the t50
    (40 CFR 1065.308, REFERENCES 1.12), delay + tau ln 2 (the step response of a first-order
    lag reaches 50 % after tau ln 2, law of the exponential)."""
    frame, _ = make_night(seed=seed, delay=delay, tau=tau, hours=3.0)
    out, attrs = align_analyzers(frame, ["co2", "o2"], {}, None)
    assert attrs["method"] == "cross-correlation"
    assert attrs["analyzer_delay_s"] == pytest.approx(delay + tau * np.log(2), abs=0.75)
    assert attrs["quality"] > DEFAULTS["alignment_min_quality"]
    d = json.loads(attrs["per_channel_delay_s"])["co2"]
    t = frame["time"].to_numpy()
    np.testing.assert_allclose(  # the JSON attribute is rounded to 1 ms
        out["co2"].to_numpy()[:100], np.interp(t[:100] + d, t, frame["co2"]), rtol=1e-4
    )
    assert out["co2"].iloc[-1:].isna().all()
    pd.testing.assert_series_equal(out["lambda_sensor"], frame["lambda_sensor"])
    pd.testing.assert_series_equal(out["speed"], frame["speed"])


def test_alignment_falls_back_without_transients() -> None:
    t = np.arange(0.0, 3600.0)
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(
        {
            "time": t,
            "fuel_mass_flow": 10 + 0.02 * rng.standard_normal(t.size),
            "air_mass_flow": 300 + 0.5 * rng.standard_normal(t.size),
            "co2": 0.1 + 1e-4 * rng.standard_normal(t.size),
        }
    )
    _, attrs = align_analyzers(frame, ["co2"], {}, 9.5)
    assert (attrs["method"], attrs["analyzer_delay_s"]) == ("configured", 9.5)
    _, attrs = align_analyzers(frame, ["co2"], {}, None)
    assert attrs["method"] == "default"
    assert attrs["analyzer_delay_s"] == DEFAULTS["default_analyzer_delay_s"]


# --- steady points ---------------------------------------------------------------------------
def test_steady_points_exclude_ramps_and_settling() -> None:
    frame, derived = make_night(hours=2.0)
    res = run_checks(frame, derived, {}, has_sensor=True)
    steady = res.series["steady"].astype(bool)
    speed = frame["speed"].to_numpy()
    ramping = np.abs(np.gradient(speed)) > 15.0  # > 5 sigma of the speed noise
    table = res.tables["steady_points"]
    # the trailing window sees a ramp after its first sample or two
    assert (steady & ramping).sum() <= 2 * len(table)
    assert len(table) >= 8
    dur = table["end_s"] - table["start_s"]
    assert (dur >= DEFAULTS["steady_min_duration_s"]).all()
    assert {"speed_mean", "speed_std", "residual_carbon_flow_mean", "lambda_flow_std"} <= set(table)
    assert (table["speed_std"] < 0.02 * table["speed_mean"]).all()


# --- clean nights, transients, invariance -----------------------------------------------------
def test_clean_nights_raise_no_instrument_flag() -> None:
    """Several clean nights with different noise, biases, fuels and seeds: no drift or
    disagreement flag (false-alarm rate measured over 12 nights: 0)."""
    alarms = 0
    for i, (fuel, noise, bias) in enumerate(
        [
            (f, n, b)
            for f in ("diesel", "gasoline")
            for n in (0.005, 0.02)
            for b in (0.0, 0.003, 0.005)
        ]
    ):
        frame, derived = make_night(seed=100 + i, fuel=fuel, noise=noise, point_bias=bias)
        res = run_checks(frame, derived, {}, has_sensor=True)
        alarms += len(_judged_flags(res))
        assert all(
            v.status == "ok" for v in res.verdicts if v.instrument in ("co2", "o2", "air_mass_flow")
        )
    assert alarms == 0


def test_transients_alone_raise_nothing() -> None:
    """A night of continuous ramps (no steady point): nothing is judged, nothing flagged."""
    t = np.arange(0.0, 4 * 3600.0)
    speed = 2000 + 800 * np.sin(2 * np.pi * t / 97.0)
    lam = 1.8 + 0.4 * np.sin(2 * np.pi * t / 61.0)
    frame = pd.DataFrame(
        {
            "time": t,
            "speed": speed,
            "torque": 200 + 150 * np.sin(2 * np.pi * t / 73.0),
            "fuel_mass_flow": 10 + 5 * np.sin(2 * np.pi * t / 73.0),
            "air_mass_flow": 300.0,
        }
    )
    rng = np.random.default_rng(2)
    derived = pd.DataFrame(
        {
            "lambda_flow": lam,
            "lambda_carbon": lam * (1 + 0.1 * np.sin(t / 30.0)),
            "lambda_oxygen": lam * (1 + 0.02 * rng.standard_normal(t.size)),
            "valid": 1.0,
            "sampling": 1.0,
        }
    )
    res = run_checks(frame, derived, {}, has_sensor=False)
    assert res.series["steady"].sum() == 0
    assert len(_judged_flags(res)) == 0


def test_scaling_flows_and_engine_channels_changes_nothing() -> None:
    """Another unit for each channel (g/s instead of kg/h, rad/s-like scaling of speed):
    same steady mask, same flags."""
    frame, derived = make_night(seed=5, fault="co2", kind="step", size=-0.04, hours=5.0)
    base = run_checks(frame, derived, {}, has_sensor=True)
    scaled = frame.copy()
    for col, k in [
        ("fuel_mass_flow", 1000 / 3600),
        ("air_mass_flow", 1000 / 3600),
        ("speed", 0.1047),
        ("torque", 0.7376),
    ]:
        scaled[col] = frame[col] * k
    other = run_checks(scaled, derived, {}, has_sensor=True)
    np.testing.assert_array_equal(base.series["steady"], other.series["steady"])
    pd.testing.assert_frame_equal(_judged_flags(base), _judged_flags(other))


# --- faults ----------------------------------------------------------------------------------
CASES = [
    ("diesel", "co2", "ramp", 0.04),
    ("diesel", "co2", "step", -0.03),
    ("diesel", "o2", "step", 0.02),
    ("gasoline", "o2", "ramp", -0.03),
    ("diesel", "air", "step", 0.04),
    ("gasoline", "air", "step", -0.04),
    ("diesel", "fuel", "ramp", 0.04),
    ("gasoline", "co2", "ramp", 0.04),
    ("diesel", "sensor", "step", 0.04),
]


@pytest.mark.parametrize(("fuel", "fault", "kind", "size"), CASES)
def test_fault_is_found_with_suspect_onset_and_size(
    fuel: str, fault: str, kind: str, size: float
) -> None:
    onset_h = 2.5
    frame, derived = make_night(
        seed=7, fuel=fuel, fault=fault, kind=kind, size=size, onset_h=onset_h
    )
    res = run_checks(frame, derived, {}, has_sensor=True)
    drift = res.flags[res.flags["check"] == "drift"]
    assert len(drift) == 1, res.flags
    row = drift.iloc[0]
    assert row["suspect"] == SUSPECT[fault]
    onset_s = onset_h * 3600
    assert -120.0 <= row["start_s"] - onset_s <= 3600.0  # at most a block's noise early
    assert (_judged_flags(res)["start_s"] >= onset_s - 120.0).all()
    # size: the suspect estimate's move, in % (co2: 1/(1-e) - 1; fuel: 1/(1+e) - 1)
    expected = {"co2": 1 / (1 - size) - 1, "fuel": 1 / (1 + size) - 1}.get(fault, size)
    assert row["value"] == pytest.approx(100 * expected, abs=0.3 * abs(100 * expected))
    table = res.tables["drift"].set_index("residual")
    assert table["detected"].sum() >= 2
    assert (table["min_detectable_drift_pct"] < abs(100 * size)).all()
    verdicts = {v.instrument: v.line for v in res.verdicts}
    for instrument in SUSPECT[fault].split("|"):
        assert verdicts[instrument] != "ok"
    others = {"co2", "o2", "air_mass_flow", "lambda_sensor"} - set(SUSPECT[fault].split("|"))
    assert all(verdicts[o] == "ok" for o in others)


def test_attribution_uses_the_relative_size_of_moves() -> None:
    """Lean diesel at lambda 1.6: a CO2 fault moves lambda_oxygen by (1 - 1/1.6) = 0.375 of
    lambda_carbon's move (Brettschneider, REFERENCES 2, derivative [D])."""
    noise = dict.fromkeys(
        ["residual_carbon_flow", "residual_oxygen_flow", "residual_oxygen_carbon"], 0.003
    )
    co2 = attribute(
        {
            "residual_carbon_flow": 0.04,
            "residual_oxygen_flow": 0.015,
            "residual_oxygen_carbon": -0.025,
        },
        noise,
        1.6,
        0.6,
    )
    assert co2.suspect == "co2" and co2.amount == pytest.approx(0.04, rel=0.05)
    o2 = attribute(
        {"residual_carbon_flow": 0.0, "residual_oxygen_flow": 0.02, "residual_oxygen_carbon": 0.02},
        noise,
        1.6,
        0.6,
    )
    assert o2.suspect == "o2"
    flow = attribute(
        {
            "residual_carbon_flow": -0.03,
            "residual_oxygen_flow": -0.03,
            "residual_oxygen_carbon": 0.0,
        },
        noise,
        1.6,
        0.6,
    )
    assert flow.suspect == "air_mass_flow|fuel_mass_flow" and flow.amount == pytest.approx(
        0.03, rel=0.05
    )


def test_disagreement_flag_with_hysteresis() -> None:
    """A 6 % air-meter step is beyond the 5 % tolerance: one lambda_disagreement event per
    stretch (not slivers), from the step on, naming the flow meters."""
    frame, derived = make_night(
        seed=11, fault="air", kind="step", size=0.06, onset_h=2.0, hours=4.0
    )
    res = run_checks(frame, derived, {}, has_sensor=True)
    dis = res.flags[res.flags["check"] == "lambda_disagreement"]
    assert 1 <= len(dis) <= 2
    assert (dis["suspect"] == "air_mass_flow|fuel_mass_flow").all()
    assert dis["start_s"].min() >= 2.0 * 3600 - 60


# --- data quality ----------------------------------------------------------------------------
def test_out_of_range_and_time_irregular() -> None:
    frame, derived = make_night(hours=1.0)
    frame["co"] = 50e-6
    frame.loc[1000:1100, "co"] = -500e-6
    frame.loc[2000:2050, "co2"] = 0.2
    t = frame["time"].to_numpy().copy()
    t[3000] = t[2999]  # duplicate stamp
    t[3200:] -= 5.0  # clock reset
    frame["time"] = t
    res = run_checks(frame, derived, {"ranges": {"co2": 0.16}}, has_sensor=True)
    oor = res.flags[res.flags["check"] == "out_of_range"]
    assert set(oor["suspect"]) == {"co", "co2"}
    assert oor.loc[oor["suspect"] == "co", "start_s"].iloc[0] == pytest.approx(1000, abs=10)
    assert oor.loc[oor["suspect"] == "co2", "value"].iloc[0] == pytest.approx(125.0, rel=0.05)
    irregular = res.flags[res.flags["check"] == "time_irregular"]
    # the duplicate stamp, the 2 s step after it, and the backward reset
    kinds = sorted(m.split(":")[0] for m in irregular["message"])
    assert kinds == [
        "duplicate time stamps",
        "irregular sample steps",
        "time runs backwards (reset)",
    ]
    assert (
        irregular.loc[irregular["message"].str.startswith("time runs"), "severity"].iloc[0]
        == "error"
    )


def test_console_lines_put_the_suspect_first() -> None:
    frame, derived = make_night(seed=7, fault="o2", kind="step", size=0.03, onset_h=2.5)
    res = run_checks(frame, derived, {}, has_sensor=True)
    lines = console_lines(res.verdicts)
    assert lines[0].startswith("o2") and "drift" in lines[0] and "suspect" in lines[0]
    assert any(line.startswith("co2") and line.endswith("ok") for line in lines)
    # the same verdicts are the /verdicts table
    table = res.tables["verdicts"]
    assert list(table["instrument"]) == [v.instrument for v in res.verdicts]
    assert table["status"].iloc[0] == "suspect" and table["suspect"].iloc[0] == "o2"


def test_correlation_equals_scipy_signal_correlate() -> None:
    # Reference library: scipy.signal.correlate(mode="full", method="fft") and
    # scipy.fft.next_fast_len(n, real=True); the alignment stage uses numpy.fft only.
    from scipy.fft import next_fast_len as scipy_next_fast_len
    from scipy.signal import correlate

    from pipeline.align import correlate_full, next_fast_len

    for n in [*range(1, 2000), 432_001, 864_003, 4_320_007]:
        assert next_fast_len(n) == scipy_next_fast_len(n, True), n
    rng = np.random.default_rng(7)
    for na, nb in [(1000, 1000), (10007, 5003), (3, 11)]:
        a, b = rng.normal(size=na), rng.normal(size=nb)
        np.testing.assert_allclose(
            correlate_full(a, b), correlate(a, b, mode="full", method="fft"), atol=1e-9
        )
