"""Thresholds of the checks stage: named defaults, their meaning, and the ``[checks]`` override.

Every threshold the checks use is a module-level constant below, with its unit and where the
value comes from. Values with no published source are marked *common practice* (what a
test-cell engineer would set on a typical overnight run); they are starting points, not
regulation. The ``[checks]`` table of the cell config overrides any of them by its lower-case
name (``steady_window_s = 30``); :func:`resolve_settings` returns the full set actually used,
which the result file records so a result can be reproduced.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from ..errors import ConfigError

if TYPE_CHECKING:
    from ..config import Config

# --- time alignment (REFERENCES 1.12: t50 of 40 CFR 1065.308 is the delay to remove) --------
#: Analyzer transport delay used when neither the night's transients nor the config give one
#: [s]. Common practice: heated raw-exhaust sample lines of a few metres plus analyzer t50 put
#: the delay at a few seconds to about ten.
DEFAULT_ANALYZER_DELAY_S = 6.0
#: Longest delay searched by the cross-correlation [s] (common practice: longer sample lines
#: than this mean a set-up problem, not a delay to correct).
ALIGNMENT_MAX_DELAY_S = 40.0
#: Grid step of the uniform resample used for the cross-correlation [s]; the data step is used
#: when it is coarser. The peak is refined below one step by a parabola (common practice).
ALIGNMENT_GRID_S = 0.5
#: Width of the moving average applied before differentiating [s] (common practice: long
#: enough that the map's 10-120 s ramps, not sample noise, dominate the derivatives).
ALIGNMENT_SMOOTH_S = 5.0
#: Fewest transients of the fuel/air ratio a night must hold before its own delay is trusted
#: (common practice).
ALIGNMENT_MIN_TRANSIENTS = 3
#: A transient: the fuel/air ratio changes at a rate that would move it by more than this
#: fraction of its median within ``ALIGNMENT_TRANSIENT_WINDOW_S`` (common practice).
ALIGNMENT_TRANSIENT_FRACTION = 0.05
#: See ``ALIGNMENT_TRANSIENT_FRACTION`` [s] (common practice: map ramps last 10-120 s).
ALIGNMENT_TRANSIENT_WINDOW_S = 60.0
#: Lowest normalised cross-correlation peak (|rho|, 0..1) accepted as an estimate (common
#: practice).
ALIGNMENT_MIN_QUALITY = 0.3

# --- engine state ---------------------------------------------------------------------------
#: Below this speed the engine is off (stopped or cranking) [rpm] (common practice: starters
#: crank at 150-300 rpm, diesel and gasoline engines idle at 600-1000 rpm).
ENGINE_OFF_SPEED_RPM = 300.0
#: Fuel flow at or below this fraction of the night's 99th percentile means no combustion
#: (engine stopped, fuel cut, meter at rest) [1] (common practice: a Coriolis meter's zero
#: scatter is well below 1 % of full flow).
ENGINE_OFF_FUEL_FRACTION = 0.01
#: Off stretches shorter than this are not a stop (a bad cell, a speed pick-up glitch) [s]
#: (common practice).
ENGINE_MIN_STOP_S = 5.0
#: After a start, samples are "starting" for this long: the exhaust lines are purged of air,
#: the lambda sensor heats, the engine warms its combustion chamber [s] (common practice).
ENGINE_START_SETTLE_S = 120.0
#: Running below this fraction of the night's 99th-percentile torque is idle [1] (common
#: practice).
ENGINE_IDLE_TORQUE_FRACTION = 0.05

# --- steady operating points ----------------------------------------------------------------
#: Trailing window over which speed, torque and fuel flow must be steady [s] (common practice).
STEADY_WINDOW_S = 20.0
#: Settling time dropped at the start of each steady stretch, for thermal and analyzer
#: settling [s] (common practice; the window above already adds its own length).
STEADY_SETTLE_S = 30.0
#: Shortest steady point kept, after settling [s] (common practice).
STEADY_MIN_DURATION_S = 60.0
#: Largest standard deviation of speed within the window, as a fraction of its mean [1]
#: (common practice: speed-controlled dynamometers hold about 0.2-0.5 %).
STEADY_SPEED_REL = 0.01
#: Largest standard deviation of torque within the window, fraction of its mean [1] (common
#: practice).
STEADY_TORQUE_REL = 0.03
#: Largest standard deviation of fuel mass flow within the window, fraction of its mean [1]
#: (common practice: Coriolis meters at steady load scatter about 0.5-1 %).
STEADY_FUEL_REL = 0.03
#: The means above are floored at this fraction of the night's 99th percentile, so idle and
#: low-load points with a small mean are not held to an impossible absolute limit [1]
#: (common practice). All steady limits are relative, so scaling a channel changes nothing.
STEADY_FLOOR_FRACTION = 0.25

# --- absolute disagreement -----------------------------------------------------------------
#: Largest |lambda_a / lambda_b - 1| between the flow, carbon-balance and oxygen-balance
#: estimates before it counts as a disagreement [1] (common practice: in a healthy cell the
#: estimates agree to 1-2 % on average, with 0.3-1 % scatter from point to point; 5 % keeps
#: a clean night quiet, smaller persistent changes are the drift check's job).
DISAGREEMENT_TOLERANCE = 0.05
#: The same for residuals that involve the wide-band sensor [1] (common practice: wide-band
#: sensors hold about 1.5 % at lambda 1 and a few % lean).
DISAGREEMENT_TOLERANCE_SENSOR = 0.06
#: Hysteresis: a disagreement ends only when |residual| falls below this fraction of the
#: tolerance [1] (common practice).
DISAGREEMENT_RELEASE_FRACTION = 0.7
#: Shortest disagreement reported, counted over judged (steady) samples [s] (common practice).
DISAGREEMENT_MIN_DURATION_S = 120.0
#: Rolling median applied to residuals before the tolerance test [s] (common practice).
DISAGREEMENT_SMOOTH_S = 30.0
#: Disagreements separated by less than this (e.g. a transient between two steady points)
#: are one interval [s] (common practice).
DISAGREEMENT_MERGE_GAP_S = 900.0

# --- drift ----------------------------------------------------------------------------------
#: Steady intervals are cut into blocks of about this length; the median residual of each block
#: is one sample of the drift statistic [s] (common practice: a map point of a few minutes is
#: one sample; a long hold gives one sample per quarter hour).
DRIFT_BLOCK_S = 900.0
#: Fewest judged samples a block needs [1].
DRIFT_BLOCK_MIN_SAMPLES = 10
#: Length of the early baseline, from the first steady block [s] (common practice: the first
#: hour after warm-up).
DRIFT_BASELINE_S = 3600.0
#: Fewest blocks in the baseline (it is extended when the first hour holds fewer) [1].
DRIFT_BASELINE_MIN_BLOCKS = 6
#: CUSUM reference value k, in units of the residual's robust noise [1] (Page 1954; k = 0.5
#: is the usual choice for a one-sigma shift, Montgomery, Introduction to Statistical Quality
#: Control, ch. 9).
DRIFT_CUSUM_K = 0.5
#: CUSUM decision interval h, in noise units [1]. Montgomery (ch. 9) quotes h = 4-5 for an
#: in-control run length of several hundred; a night is judged on ~6 residuals at once and
#: the block medians are not fully independent, so a larger h is used (common practice).
DRIFT_CUSUM_H = 10.0
#: Floor on the robust noise of a residual [1] (common practice: below 0.1 % lambda the
#: estimates are limited by model, not noise).
DRIFT_NOISE_FLOOR = 0.001
#: Smallest drift reported, as a fraction [1] (common practice: below about 1 % in lambda the
#: estimates differ by model details such as humidity, not by instrument faults).
DRIFT_MIN_SIZE = 0.01
#: Smallest drift reported, in units of the residual's robust noise [1] (common practice).
DRIFT_MIN_SIGNIFICANCE = 3.0
#: Fewest blocks after the onset for a drift to be reported [1].
DRIFT_MIN_BLOCKS = 3

# --- attribution ----------------------------------------------------------------------------
#: Fraction of the (noise-weighted) residual pattern the best single-instrument hypothesis
#: must explain to be named alone; otherwise the two best are named [1] (common practice).
ATTRIBUTION_MIN_EXPLAINED = 0.6

# --- data quality ---------------------------------------------------------------------------
#: Negative readings count as out of range below -(this fraction of the configured range)
#: [1] (common practice: zero drift within ~1 % of full scale, REFERENCES 1.10 (40 CFR 89.314
#: uses 2 % of full scale)).
OUT_OF_RANGE_NEGATIVE_FRACTION = 0.01
#: ... or, with no configured range, below this absolute value [mol/mol] (common practice:
#: 50 umol/mol).
OUT_OF_RANGE_NEGATIVE_ABS = 50e-6
#: Readings above 100 % of the configured range are out of range (40 CFR 1065.550 range rule,
#: REFERENCES 1.10 [M]); this is the fraction of range used [1].
OUT_OF_RANGE_HIGH_FRACTION = 1.0
#: Centred rolling median applied before the range tests, so single noisy samples around zero
#: do not count [s] (common practice).
OUT_OF_RANGE_SMOOTH_S = 10.0
#: Out-of-range stretches closer than this are one flag [s] (common practice).
OUT_OF_RANGE_MERGE_GAP_S = 10.0
#: A sample step larger than this multiple of the median step is irregular [1] (common practice).
TIME_STEP_FACTOR = 1.5
#: Steps larger than this multiple of the median step are data gaps (flagged as data_gap by
#: the pipeline, not here) [1] (common practice).
TIME_GAP_FACTOR = 10.0

# --- verdicts -------------------------------------------------------------------------------
#: Fewest seconds of steady, valid running (analyzers sampling exhaust) a night must hold
#: before an instrument is judged "ok"; below it the verdict is "not enough data" [s]
#: (common practice: ten minutes give a few steady points and two drift blocks' worth).
VERDICT_MIN_JUDGED_S = 600.0

#: Availability flags (analyzers not sampling, engine off) closer than this are one interval
#: [s] (common practice: a purge pulse train or a stall-restart is one event).
AVAILABILITY_MERGE_GAP_S = 60.0
#: Availability intervals shorter than this are not listed (the samples stay masked) [s]
#: (common practice: a few samples of a valve switching are not an event).
AVAILABILITY_MIN_DURATION_S = 5.0

#: Every threshold, by its ``[checks]`` key.
DEFAULTS: dict[str, float] = {
    "default_analyzer_delay_s": DEFAULT_ANALYZER_DELAY_S,
    "alignment_max_delay_s": ALIGNMENT_MAX_DELAY_S,
    "alignment_grid_s": ALIGNMENT_GRID_S,
    "alignment_smooth_s": ALIGNMENT_SMOOTH_S,
    "alignment_transient_window_s": ALIGNMENT_TRANSIENT_WINDOW_S,
    "alignment_min_transients": ALIGNMENT_MIN_TRANSIENTS,
    "alignment_transient_fraction": ALIGNMENT_TRANSIENT_FRACTION,
    "alignment_min_quality": ALIGNMENT_MIN_QUALITY,
    "engine_off_speed_rpm": ENGINE_OFF_SPEED_RPM,
    "engine_off_fuel_fraction": ENGINE_OFF_FUEL_FRACTION,
    "engine_min_stop_s": ENGINE_MIN_STOP_S,
    "engine_start_settle_s": ENGINE_START_SETTLE_S,
    "engine_idle_torque_fraction": ENGINE_IDLE_TORQUE_FRACTION,
    "steady_window_s": STEADY_WINDOW_S,
    "steady_settle_s": STEADY_SETTLE_S,
    "steady_min_duration_s": STEADY_MIN_DURATION_S,
    "steady_speed_rel": STEADY_SPEED_REL,
    "steady_torque_rel": STEADY_TORQUE_REL,
    "steady_fuel_rel": STEADY_FUEL_REL,
    "steady_floor_fraction": STEADY_FLOOR_FRACTION,
    "disagreement_tolerance": DISAGREEMENT_TOLERANCE,
    "disagreement_tolerance_sensor": DISAGREEMENT_TOLERANCE_SENSOR,
    "disagreement_release_fraction": DISAGREEMENT_RELEASE_FRACTION,
    "disagreement_min_duration_s": DISAGREEMENT_MIN_DURATION_S,
    "disagreement_smooth_s": DISAGREEMENT_SMOOTH_S,
    "disagreement_merge_gap_s": DISAGREEMENT_MERGE_GAP_S,
    "drift_block_s": DRIFT_BLOCK_S,
    "drift_block_min_samples": DRIFT_BLOCK_MIN_SAMPLES,
    "drift_baseline_s": DRIFT_BASELINE_S,
    "drift_baseline_min_blocks": DRIFT_BASELINE_MIN_BLOCKS,
    "drift_cusum_k": DRIFT_CUSUM_K,
    "drift_cusum_h": DRIFT_CUSUM_H,
    "drift_noise_floor": DRIFT_NOISE_FLOOR,
    "drift_min_size": DRIFT_MIN_SIZE,
    "drift_min_significance": DRIFT_MIN_SIGNIFICANCE,
    "drift_min_blocks": DRIFT_MIN_BLOCKS,
    "attribution_min_explained": ATTRIBUTION_MIN_EXPLAINED,
    "out_of_range_negative_fraction": OUT_OF_RANGE_NEGATIVE_FRACTION,
    "out_of_range_negative_abs": OUT_OF_RANGE_NEGATIVE_ABS,
    "out_of_range_high_fraction": OUT_OF_RANGE_HIGH_FRACTION,
    "out_of_range_smooth_s": OUT_OF_RANGE_SMOOTH_S,
    "out_of_range_merge_gap_s": OUT_OF_RANGE_MERGE_GAP_S,
    "verdict_min_judged_s": VERDICT_MIN_JUDGED_S,
    "availability_merge_gap_s": AVAILABILITY_MERGE_GAP_S,
    "availability_min_duration_s": AVAILABILITY_MIN_DURATION_S,
    "time_step_factor": TIME_STEP_FACTOR,
    "time_gap_factor": TIME_GAP_FACTOR,
}

#: Keys of ``settings`` that are not thresholds: ``ranges`` ({quantity: full scale in canonical
#: units}, passed by the pipeline from the channels' ``range``).
EXTRA_KEYS = ("ranges",)


def resolve_settings(settings: Mapping[str, Any] | CheckSettings | None) -> dict[str, Any]:
    """Return every threshold (defaults overridden by ``settings``) plus the extra keys.

    A :class:`CheckSettings` is already resolved: its thresholds and ranges are returned.

    Raises
    ------
    ConfigError
        For an unknown key (with a "did you mean" hint) or a non-numeric / negative value.
    """
    if isinstance(settings, CheckSettings):
        return {**settings.thresholds, "ranges": dict(settings.ranges)}
    settings = dict(settings or {})
    resolved: dict[str, Any] = dict(DEFAULTS)
    allowed = sorted(set(DEFAULTS) | set(EXTRA_KEYS))
    for key, value in settings.items():
        if key in EXTRA_KEYS:
            continue
        if key not in DEFAULTS:
            close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
            hint = f' Did you mean "{close[0]}"?' if close else ""
            raise ConfigError(
                f"unknown key '{key}' in [checks].{hint} Allowed keys: {', '.join(allowed)}."
            )
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise ConfigError(f"[checks].{key} must be a number, got {value!r}.")
        if not math.isfinite(value):
            raise ConfigError(f"[checks].{key} must be a finite number, got {value!r}.")
        if value < 0:
            raise ConfigError(f"[checks].{key} must not be negative, got {value!r}.")
        if key.endswith(("_fraction", "_rel", "tolerance", "tolerance_sensor")) and value > 1:
            raise ConfigError(f"[checks].{key} is a fraction (0..1), got {value!r}; write "
                              "0.05 for 5 %.")
        resolved[key] = float(value)
    ranges = settings.get("ranges") or {}
    if not isinstance(ranges, dict):
        raise ConfigError("checks setting 'ranges' must map quantity names to full-scale values.")
    resolved["ranges"] = {str(k): float(v) for k, v in ranges.items() if v is not None}
    return resolved


def thresholds_used(resolved: dict[str, Any]) -> dict[str, float]:
    """The threshold part of resolved settings, for the result file attributes."""
    return {k: float(resolved[k]) for k in DEFAULTS}


@dataclass(frozen=True)
class CheckSettings:
    """Everything the checks stage is set with, resolved once from the config.

    thresholds: every threshold of :data:`DEFAULTS` (the ``[checks]`` table applied);
    ranges: analyzer full scale per quantity, canonical units (the channels' ``range``);
    condensation_margin_K: ``[sampling] condensation_margin_K``; analyzer_delay_s: the
    configured delay (``[sampling] analyzer_delay_s``, None to estimate it); extra_lambda:
    the alternative lambda methods asked for; fuel_name, fuel_o_c: for the method notes.
    ``settings["key"]`` reads a threshold (and ``settings["ranges"]`` the ranges).
    """

    thresholds: Mapping[str, float]
    ranges: Mapping[str, float] = field(default_factory=dict)
    condensation_margin_K: float = 5.0
    analyzer_delay_s: float | None = None
    extra_lambda: tuple[str, ...] = ()
    fuel_name: str = ""
    fuel_o_c: float = 0.0

    def __getitem__(self, key: str) -> Any:
        return self.ranges if key == "ranges" else self.thresholds[key]

    @classmethod
    def from_config(cls, config: Config) -> CheckSettings:
        """The settings of a loaded cell config (unknown or bad ``[checks]`` keys raise
        :class:`~pipeline.errors.ConfigError`)."""
        ranges = {n: c.range for n, c in config.channels.items() if c.range}
        resolved = resolve_settings({**dict(config.checks), "ranges": ranges})
        return cls(
            thresholds=thresholds_used(resolved),
            ranges=resolved["ranges"],
            condensation_margin_K=float(config.sampling.condensation_margin_K),
            analyzer_delay_s=config.sampling.analyzer_delay_s,
            extra_lambda=tuple(config.extra_lambda),
            fuel_name=config.fuel.name,
            fuel_o_c=float(config.fuel.o_c),
        )
