"""The cell config (TOML): reading, validation with helpful messages, resolved defaults.

Contract (DESIGN.md, README "Config reference"): top-level tables ``[run]``, ``[fuel]``,
``[input]``, ``[channels.<quantity>]``, ``[sampling]``, ``[checks]``. Unknown keys are errors
with a "did you mean" hint.
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any

from .errors import ConfigError
from .fuels import Fuel, blend_by_mass, load_presets
from .quantities import INPUTS

#: ``Channel.unit`` of a column channel whose config gives no unit: the file must give it
#: (units row, unit in the name, Parquet field metadata, MDF channel unit).
UNIT_FROM_FILE = ""

REQUIRED_CHANNELS = ("time", "fuel_mass_flow", "air_mass_flow", "co2", "o2")

_TOP_KEYS = {
    "run", "fuel", "input", "channels", "sampling", "checks", "methods", "drift_correction",
    "verification",
}
_METHODS_KEYS = {"extra_lambda"}
_DRIFTCOR_KEYS = {"zero_mode", "span_mode", "settle_s"}
_DRIFTCOR_GAS_KEYS = {"span_gas", "zero_gas", "pre_zero", "pre_span", "post_zero", "post_span"}
_VERIFICATION_KEYS = {"eps_rC_max", "eps_aC_max_g", "eps_aCrate_max_g_per_h",
                      "drift_validation_limit"}
_RUN_KEYS = {"name", "description"}
_FUEL_KEYS = {
    "preset", "blend", "h_c", "o_c", "s_c", "n_c", "c", "lhv_MJ_per_kg", "density_kg_per_m3"
}
_INPUT_KEYS = {"delimiter", "decimal", "encoding", "units_row", "timezone", "raster_s",
               "standard_temperature_degC", "standard_pressure_kPa"}
_CHANNEL_KEYS = {"column", "value", "unit", "basis", "carbon_number", "format", "range",
                 "states"}

#: Bench states an ``analyzer_mode`` text channel may name (``[channels.analyzer_mode]
#: states``), with their codes: 0 sample; zero and span take ``[drift_correction]
#: zero_mode``/``span_mode`` (default 1, 2); 3 purge (incl. probe back-purges); 4 leak check.
BENCH_STATE_NAMES = ("sample", "zero", "span", "purge", "leak_check")
_SAMPLING_KEYS = {
    "dryer_dewpoint_degC",
    "dryer_pressure_kPa",
    "analyzer_delay_s",
    "intake_co2_ppm",
    "not_sampling_carbon_fraction",
    "nox_no2_fraction",
    "condensation_margin_K",
    "not_sampling_guard_s",
}


def _hint(word: str, options: set[str] | list[str]) -> str:
    close = difflib.get_close_matches(word, sorted(options), n=1, cutoff=0.6)
    return f' Did you mean "{close[0]}"?' if close else ""


def _check_keys(table: Any, allowed: set[str], where: str, path: Path) -> None:
    if not isinstance(table, dict):
        raise ConfigError(
            f"{path}: {where} must be a table (a [section] with key = value lines), got "
            f"{table!r}."
        )
    for key in table:
        if key not in allowed:
            what = "table" if isinstance(table[key], dict) else "key"
            raise ConfigError(
                f"{path}: unknown {what} '{key}' in {where}.{_hint(key, allowed)} "
                f"Allowed: {', '.join(sorted(allowed))}."
            )


@dataclass(frozen=True)
class Channel:
    """How one canonical quantity is found in the logged data.

    Either ``column`` (the logger's column name) or ``value`` (a constant, e.g. a barometer
    reading taken by hand) is given, always with its ``unit``.
    """

    quantity: str
    unit: str
    column: str | None = None
    value: float | None = None
    basis: str | None = None  # "dry" / "wet" for gases and the air meter
    carbon_number: float = 1.0  # THC: carbon atoms of the reported basis
    format: str | None = None  # time: "seconds" (default) or "iso8601"
    range: float | None = None  # analyzer full-scale range, in `unit`
    join_column: str | None = None  # time: a second column (the time of day) joined to column
    #: analyzer_mode: words of a text status column per bench state (BENCH_STATE_NAMES)
    states: dict[str, tuple[str, ...]] | None = None
    #: False when the config left the unit implicit (canonical, or the file's own unit).
    unit_given: bool = field(default=True, compare=False)


@dataclass(frozen=True)
class InputOptions:
    """How to read the logger file; None means "detect"."""

    delimiter: str | None = None
    decimal: str | None = None
    encoding: str | None = None
    units_row: bool | None = None
    timezone: str | None = None
    # the common time raster [s] for every format (MDF default: its fastest channel; other
    # formats default: the file's own rows)
    raster_s: float | None = None
    # reference state of standard volume flows of air (scfm, Sm3/h); default 60 degF, 1 atm
    standard_temperature_degC: float | None = None
    standard_pressure_kPa: float | None = None

    @property
    def standard_state(self) -> tuple[float, float]:
        """(degC, kPa) of standard volume flows (units.STANDARD_* when not configured)."""
        from .units import STANDARD_PRESSURE_KPA, STANDARD_TEMPERATURE_DEGC

        t = self.standard_temperature_degC
        p = self.standard_pressure_kPa
        return (STANDARD_TEMPERATURE_DEGC if t is None else t,
                STANDARD_PRESSURE_KPA if p is None else p)


@dataclass(frozen=True)
class Sampling:
    """Exhaust sampling set-up.

    dryer_dewpoint_degC: outlet dew point of the sample chiller/dryer, for the water left in
        the sample of dry-basis analyzers; None means bone dry.
    dryer_pressure_kPa: absolute pressure at the dryer outlet; None means ambient pressure.
    analyzer_delay_s: transport delay of the analyzers (fallback and override for alignment).
    intake_co2_ppm: dry intake-air CO2, default 375 umol/mol (40 CFR 1065.655, 1065.643(b)).
    not_sampling_carbon_fraction: below this exhaust carbon (CO2 + CO + THC, dry, mol/mol)
        while fuel flows, the analyzers are taken as not sampling exhaust (common practice:
        even very lean idle exhaust holds well above 1 % CO2).
    nox_no2_fraction: share of NO2 in a NOx reading when NO and NO2 are not measured apart.
        40 CFR 1065.656(c)(1): 0 for stoichiometric engines, 0.25 for lean-burn engines, 0.75
        with NO2-storage aftertreatment.
    condensation_margin_K: a ``condensation_risk`` flag is raised where the logged
        sample-line temperature is below the exhaust dew point plus this margin (common
        practice: keep heated lines well above the dew point).
    not_sampling_guard_s: every not-sampling stretch is widened by this on both sides, for
        the analyzers' response to the gas change (common practice: a few time constants).
    """

    dryer_dewpoint_degC: float | None = None
    dryer_pressure_kPa: float | None = None
    analyzer_delay_s: float | None = None
    intake_co2_ppm: float = 375.0
    not_sampling_carbon_fraction: float = 0.003
    nox_no2_fraction: float = 0.0
    condensation_margin_K: float = 5.0
    not_sampling_guard_s: float = 5.0


@dataclass(frozen=True)
class DriftReference:
    """Zero/span references of one analyzer for the 40 CFR 1065.672 drift correction.

    All in the channel's own unit, as the analyzer reads. ``span_gas`` (x_refspan) is the
    span-gas concentration; ``zero_gas`` (x_refzero) normally 0. Pre/post readings given here
    override the ones found in the log's ``analyzer_mode`` windows.
    """

    gas: str
    span_gas: float
    zero_gas: float = 0.0
    pre_zero: float | None = None
    pre_span: float | None = None
    post_zero: float | None = None
    post_span: float | None = None


@dataclass(frozen=True)
class DriftCorrection:
    """``[drift_correction]``: analyzer_mode codes of zero and span windows, the settling
    time skipped at both ends of a window, and the references per analyzer."""

    zero_mode: float = 1
    span_mode: float = 2
    settle_s: float = 60.0
    gases: dict[str, DriftReference] = field(default_factory=dict)


@dataclass(frozen=True)
class Verification:
    """``[verification]``: user limits for pass/fail verdicts.

    40 CFR 1065.543 limits for the carbon-balance error were not available to us, so the
    carbon-balance verdict is given only against limits configured here (absolute values).
    ``drift_validation_limit`` is the 1065.550 limit (default 0.04, from memory).
    """

    eps_rC_max: float | None = None
    eps_aC_max_g: float | None = None
    eps_aCrate_max_g_per_h: float | None = None
    drift_validation_limit: float = 0.04


@dataclass
class Config:
    """A resolved cell config."""

    path: Path
    run_name: str
    description: str
    fuel: Fuel
    input: InputOptions
    channels: dict[str, Channel]
    sampling: Sampling
    checks: dict[str, Any] = field(default_factory=dict)
    extra_lambda: tuple[str, ...] = ()
    drift_correction: DriftCorrection = field(default_factory=DriftCorrection)
    verification: Verification = field(default_factory=Verification)
    raw: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """The resolved config as plain data (defaults filled in), for the result file.

        It loads again as a config: the fuel is written as its explicit atomic ratios (the
        preset name and derived properties are in the result file's ``fuel`` attribute).
        """
        f = self.fuel
        fuel: dict[str, Any] = {"h_c": f.h_c, "o_c": f.o_c, "s_c": f.s_c, "n_c": f.n_c}
        if f.c != 1.0:
            fuel["c"] = f.c
        for key in ("lhv_MJ_per_kg", "density_kg_per_m3"):
            if getattr(f, key) is not None:
                fuel[key] = getattr(f, key)

        def channel(ch: Channel) -> dict[str, Any]:
            d = {k: v for k, v in asdict(ch).items()
                 if v is not None and k not in ("quantity", "unit_given")}
            if ch.quantity != "thc":
                d.pop("carbon_number", None)
            if d.pop("join_column", None):
                d["column"] = [ch.column, ch.join_column]
            if d.get("states"):
                d["states"] = {k: list(v) for k, v in d["states"].items()}
            return d

        return {
            "run": {"name": self.run_name, "description": self.description},
            "fuel": fuel,
            "input": {k: v for k, v in asdict(self.input).items() if v is not None},
            "channels": {name: channel(ch) for name, ch in self.channels.items()},
            "sampling": {k: v for k, v in asdict(self.sampling).items() if v is not None},
            "checks": dict(self.checks),
            "methods": {"extra_lambda": list(self.extra_lambda)},
            "drift_correction": {
                "zero_mode": self.drift_correction.zero_mode,
                "span_mode": self.drift_correction.span_mode,
                "settle_s": self.drift_correction.settle_s,
                **{
                    g: {k: v for k, v in asdict(ref).items() if v is not None and k != "gas"}
                    for g, ref in self.drift_correction.gases.items()
                },
            },
            "verification": {k: v for k, v in asdict(self.verification).items() if v is not None},
        }

    def to_toml(self) -> str:
        """The resolved config as TOML text."""
        return dumps_toml(self.to_dict())

    def sha256(self) -> str:
        """SHA-256 of the resolved config (a night is redone when it changes)."""
        import hashlib

        return hashlib.sha256(self.to_toml().encode("utf-8")).hexdigest()


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    s = str(v).replace("\\", "\\\\").replace('"', '\\"').replace("\t", "\\t").replace("\n", "\\n")
    return f'"{s}"'


def dumps_toml(data: dict[str, Any], prefix: str = "") -> str:
    """Minimal TOML writer for nested dicts of scalars (tomllib only reads)."""
    lines: list[str] = []
    scalars = {k: v for k, v in data.items() if not isinstance(v, dict)}
    tables = {k: v for k, v in data.items() if isinstance(v, dict)}
    if prefix and (scalars or not tables):
        lines.append(f"[{prefix}]")
    for k, v in scalars.items():
        lines.append(f"{k} = {_toml_value(v)}")
    if lines:
        lines.append("")
    for k, v in tables.items():
        lines.append(dumps_toml(v, f"{prefix}.{k}" if prefix else k))
    return "\n".join(lines)


#: Physical range of every numeric config value, by its place (lower, upper; inclusive).
#: A value outside makes the result meaningless and is refused at load (common practice
#: bounds of a test cell, deliberately wide).
_RANGES: dict[str, tuple[float, float]] = {
    "[fuel].h_c": (0.0, 4.0), "[fuel].o_c": (0.0, 2.0), "[fuel].s_c": (0.0, 0.1),
    "[fuel].n_c": (0.0, 2.0), "[fuel].c": (0.0, 1.0),
    "[fuel].lhv_MJ_per_kg": (1.0, 150.0), "[fuel].density_kg_per_m3": (0.05, 2000.0),
    "[sampling].dryer_dewpoint_degC": (-60.0, 60.0),
    "[sampling].dryer_pressure_kPa": (20.0, 400.0),
    "[sampling].analyzer_delay_s": (0.0, 300.0),
    "[sampling].intake_co2_ppm": (0.0, 10000.0),
    "[sampling].not_sampling_carbon_fraction": (0.0, 0.05),
    "[sampling].nox_no2_fraction": (0.0, 1.0),
    "[sampling].condensation_margin_K": (0.0, 100.0),
    "[sampling].not_sampling_guard_s": (0.0, 3600.0),
    "[input] raster_s": (1e-4, 3600.0),
    "[drift_correction] settle_s": (0.0, 3600.0),
}


def _line_of(path: Path, where: str) -> int | None:
    """The line of the key ``where`` (``[table].key``, ``[table] key``) in the config file."""
    m = re.match(r"\[([^\]]+)\]\.?\s*([\w]+)", where)
    if m is None:
        return None
    table, key = m.group(1).strip(), m.group(2)
    try:
        lines = path.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError):
        return None
    current = ""
    for i, line in enumerate(lines, start=1):
        head = re.match(r"\s*\[([^\[\]]+)\]\s*(#.*)?$", line)
        if head:
            current = head.group(1).strip()
        elif current == table and re.match(rf"\s*{re.escape(key)}\s*=", line):
            return i
    return None


def _number(value: Any, where: str, path: Path) -> float:
    """A config number: int or float, finite, inside its physical range (:data:`_RANGES`);
    ConfigError naming the file, line and key otherwise."""
    def at() -> str:
        line = _line_of(path, where)
        return f"{path}, line {line}" if line else f"{path}"

    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ConfigError(f"{at()}: {where} must be a number, got {value!r}.")
    x = float(value)
    if not math.isfinite(x):
        raise ConfigError(f"{at()}: {where} must be a finite number, got {value!r}.")
    lo, hi = _RANGES.get(where, (-math.inf, math.inf))
    if not lo <= x <= hi:
        raise ConfigError(f"{at()}: {where} = {value!r} is outside its physical range "
                          f"[{lo:g}, {hi:g}].")
    return x


def _optional_number(table: dict[str, Any], key: str, where: str, path: Path) -> float | None:
    return _number(table[key], f"{where}.{key}", path) if key in table else None


def _parse_fuel(table: dict[str, Any], path: Path) -> Fuel:
    _check_keys(table, _FUEL_KEYS, "[fuel]", path)
    presets = load_presets()
    if "blend" in table:
        blend = table["blend"]
        others = set(table) - {"blend", "density_kg_per_m3"}
        if not isinstance(blend, dict) or not blend or others:
            raise ConfigError(
                f"{path}: [fuel] blend must be an inline table of preset = mass share, e.g. "
                "blend = { diesel_2 = 0.93, ethanol = 0.07 }, and stands alone in [fuel]."
            )
        parts = []
        for name, share in blend.items():
            if name not in presets:
                raise ConfigError(
                    f"{path}: unknown fuel preset '{name}' in [fuel] blend.{_hint(name, presets)}"
                )
            value = _number(share, f"[fuel] blend.{name}", path)
            if value < 0:
                raise ConfigError(f"{path}: [fuel] blend.{name} must not be negative.")
            parts.append((presets[name], value))
        if sum(v for _, v in parts) <= 0:
            raise ConfigError(f"{path}: [fuel] blend shares must add up to more than zero.")
        return blend_by_mass("blend", parts)
    if "preset" in table:
        name = table["preset"]
        if name not in presets:
            raise ConfigError(
                f"{path}: unknown fuel preset '{name}' in [fuel].{_hint(str(name), presets)} "
                f"Presets: {', '.join(presets)} (see `dynoqc fuels`)."
            )
        explicit = set(table) - {"preset", "lhv_MJ_per_kg", "density_kg_per_m3"}
        if explicit:
            raise ConfigError(
                f"{path}: [fuel] gives both preset and {', '.join(sorted(explicit))}; "
                "use either a preset or explicit atomic ratios."
            )
        fuel = presets[name]
        overrides = {
            k: _number(table[k], f"[fuel].{k}", path)
            for k in ("lhv_MJ_per_kg", "density_kg_per_m3")
            if k in table
        }
        if overrides:
            fuel = replace(fuel, **overrides)
        return fuel
    if "h_c" not in table:
        raise ConfigError(
            f"{path}: [fuel] needs either preset = \"...\" or the atomic ratio h_c "
            "(with optional o_c, s_c, n_c)."
        )
    ratios = {
        k: _number(table.get(k, 0.0), f"[fuel].{k}", path) for k in ("h_c", "o_c", "s_c", "n_c")
    }
    ratios["c"] = _number(table.get("c", 1.0), "[fuel].c", path)
    for k, v in ratios.items():
        if v < 0:
            raise ConfigError(f"{path}: [fuel].{k} must not be negative, got {v}.")
    if ratios["c"] == 0 and ratios["h_c"] == 0:
        raise ConfigError(f"{path}: [fuel] has neither carbon (c) nor hydrogen (h_c): nothing "
                          "burns; give the fuel's atomic ratios or a preset.")
    fuel = Fuel(
        name="custom",
        **ratios,
        lhv_MJ_per_kg=_optional_number(table, "lhv_MJ_per_kg", "[fuel]", path),
        density_kg_per_m3=_optional_number(table, "density_kg_per_m3", "[fuel]", path),
        source="explicit atomic ratios in the config",
    )
    if not fuel.o2_stoich_per_c > 0:
        raise ConfigError(f"{path}: [fuel] with these ratios needs no oxygen to burn "
                          f"(o_c = {ratios['o_c']:g} is too high): check the ratios.")
    return fuel


def _parse_column(
    name: str, table: dict[str, Any], where: str, path: Path
) -> tuple[str | None, str | None]:
    """(column, join column): time may join a date and a time-of-day column."""
    column = None
    if name == "time" and isinstance(table.get("column"), list):
        cols = table["column"]
        if len(cols) != 2 or not all(isinstance(c, str) and c.strip() for c in cols):
            raise ConfigError(
                f"{path}: {where} column = [...] joins a date and a time-of-day column: give "
                f"two column names, e.g. column = [\"Date\", \"Time\"]; got {cols!r}."
            )
        return cols[0], cols[1]
    elif "column" in table:
        if not isinstance(table["column"], str) or not table["column"].strip():
            raise ConfigError(
                f"{path}: {where} column must be the logger's column name as text, e.g. "
                f"column = \"{name}\"; got {table['column']!r}."
            )
        column = table["column"]
    return column, None


def _parse_channel(name: str, table: Any, path: Path) -> Channel:
    where = f"[channels.{name}]"
    if not isinstance(table, dict):
        raise ConfigError(f"{path}: {where} must be a table with column and unit.")
    _check_keys(table, _CHANNEL_KEYS, where, path)
    q = INPUTS[name]
    if ("column" in table) == ("value" in table):
        raise ConfigError(f"{path}: {where} needs exactly one of column = \"...\" or value = ...")
    if "unit" not in table:
        if q.unit == "1" or name == "time":
            unit = q.unit
        elif "value" in table:
            raise ConfigError(f"{path}: {where} needs unit = \"...\" (canonical: {q.unit}).")
        else:
            unit = UNIT_FROM_FILE  # taken from the file (units row, schema, channel metadata)
    else:
        unit = table["unit"]
    basis = table.get("basis")
    if q.needs_basis:
        if basis not in ("dry", "wet"):
            got = "no basis" if basis is None else f"basis = {basis!r}"
            hint = _hint(str(basis).strip().lower(), ["dry", "wet"]) if basis is not None else ""
            raise ConfigError(
                f"{path}: {where} has {got}; {name} needs basis = \"dry\" (measured after a "
                f"chiller/dryer) or basis = \"wet\" (hot, undried sample"
                f"{' or the usual humid-air meter' if name == 'air_mass_flow' else ''}).{hint}"
            )
    elif basis is not None:
        raise ConfigError(f"{path}: {where} has basis, but {name} is not a gas concentration.")
    carbon_number = 1.0
    if "carbon_number" in table:
        if name != "thc":
            raise ConfigError(f"{path}: {where} carbon_number applies to thc only.")
        carbon_number = _number(table["carbon_number"], f"{where} carbon_number", path)
        if carbon_number <= 0:
            raise ConfigError(f"{path}: {where} carbon_number must be positive.")
    fmt = table.get("format")
    if fmt is not None and (
        name != "time" or not isinstance(fmt, str)
        or (fmt not in ("seconds", "iso8601", "clock") and "%" not in fmt)
    ):
        raise ConfigError(
            f"{path}: {where} format must be \"seconds\", \"iso8601\", \"clock\" (date and "
            "time of day in a common layout, detected) or a strftime pattern such as "
            "\"%d.%m.%Y %H:%M:%S\", and applies to time only."
        )
    value = _number(table["value"], f"{where} value", path) if "value" in table else None
    if name == "time" and value is not None:
        raise ConfigError(f"{path}: [channels.time] must name a column, not a value.")
    rng = _number(table["range"], f"{where} range", path) if "range" in table else None
    if rng is not None and not rng > 0:
        raise ConfigError(f"{path}: {where} range must be positive (the analyzer's full "
                          f"scale), got {rng!r}.")
    column, join_column = _parse_column(name, table, where, path)
    if join_column is not None:
        fmt = fmt or "clock"
    if not isinstance(unit, str):
        raise ConfigError(f"{path}: {where} unit must be text, e.g. unit = \"{q.unit}\".")
    return Channel(name, unit, column, value, basis, carbon_number, fmt, rng,
                   join_column=join_column, unit_given="unit" in table,
                   states=_parse_states(name, table.get("states"), where, path))


def _parse_states(
    name: str, states: Any, where: str, path: Path
) -> dict[str, tuple[str, ...]] | None:
    """``states = {sample = ["MESS"], zero = ["NULL"], ...}`` of a text analyzer_mode."""
    if states is None:
        return None
    if name != "analyzer_mode":
        raise ConfigError(f"{path}: {where} states applies to analyzer_mode only.")
    if not isinstance(states, dict):
        raise ConfigError(f"{path}: {where} states must be a table, e.g. states = "
                          "{sample = [\"MESS\"], zero = [\"NULL\"], span = [\"SPAN\"]}.")
    out: dict[str, tuple[str, ...]] = {}
    for key, words in states.items():
        if key not in BENCH_STATE_NAMES:
            raise ConfigError(f"{path}: {where} states has '{key}';{_hint(key, BENCH_STATE_NAMES)}"
                              f" known states: {', '.join(BENCH_STATE_NAMES)}.")
        words = [words] if isinstance(words, str) else words
        if not isinstance(words, list) or not all(isinstance(w, str) for w in words):
            raise ConfigError(f"{path}: {where} states.{key} must be a word or a list of "
                              f"words as the log writes them; got {words!r}.")
        out[key] = tuple(words)
    return out


def _parse_methods(table: Any, path: Path) -> tuple[str, ...]:
    from .balance.methods import EXTRA_METHODS

    if not isinstance(table, dict):
        raise ConfigError(f"{path}: [methods] must be a table.")
    _check_keys(table, _METHODS_KEYS, "[methods]", path)
    names = table.get("extra_lambda", [])
    if not isinstance(names, list) or not all(isinstance(n, str) for n in names):
        raise ConfigError(
            f'{path}: [methods] extra_lambda must be a list, e.g. ["spindt", "iso16183"].'
        )
    for name in names:
        if name not in EXTRA_METHODS:
            raise ConfigError(
                f"{path}: unknown method '{name}' in [methods] extra_lambda."
                f"{_hint(name, set(EXTRA_METHODS))} Available: {', '.join(EXTRA_METHODS)}."
            )
    return tuple(dict.fromkeys(names))


def _parse_drift_correction(
    table: Any, channels: dict[str, Channel], path: Path
) -> DriftCorrection:
    if not isinstance(table, dict):
        raise ConfigError(f"{path}: [drift_correction] must be a table.")
    gases: dict[str, DriftReference] = {}
    options: dict[str, float] = {}
    for key, value in table.items():
        if isinstance(value, dict):
            where = f"[drift_correction.{key}]"
            if key not in INPUTS or INPUTS[key].kind != "gas":
                gas_names = {q for q, v in INPUTS.items() if v.kind == "gas"}
                raise ConfigError(
                    f"{path}: {where} is not a gas analyzer.{_hint(key, gas_names)}"
                )
            if key not in channels:
                raise ConfigError(f"{path}: {where} refers to a channel that is not mapped.")
            _check_keys(value, _DRIFTCOR_GAS_KEYS, where, path)
            if "span_gas" not in value:
                raise ConfigError(
                    f"{path}: {where} needs span_gas = <span-gas concentration in the "
                    f"channel unit ({channels[key].unit})>."
                )
            nums = {k: _number(v, f"{where} {k}", path) for k, v in value.items()}
            if not nums["span_gas"] > nums.get("zero_gas", 0.0):
                raise ConfigError(f"{path}: {where} span_gas must be above zero_gas, got "
                                  f"{nums['span_gas']!r}.")
            gases[key] = DriftReference(gas=key, **nums)
        else:
            if key not in _DRIFTCOR_KEYS:
                raise ConfigError(
                    f"{path}: unknown key '{key}' in [drift_correction]."
                    f"{_hint(key, _DRIFTCOR_KEYS)} Allowed: {', '.join(sorted(_DRIFTCOR_KEYS))} "
                    "and one [drift_correction.<gas>] table per analyzer."
                )
            options[key] = _number(value, f"[drift_correction] {key}", path)
    return DriftCorrection(**options, gases=gases)


def _check_units(
    channels: dict[str, Channel], fuel: Fuel, path: Path, inp: InputOptions | None = None
) -> None:
    """Each channel's unit must be a known spelling of its quantity's dimension, and a basis
    written in it must agree with the channel's ``basis``; every bad unit in one error."""
    from .units import conversion, split_basis

    problems = []
    for name, ch in channels.items():
        if (name == "time" and ch.format not in (None, "seconds")) or (
            ch.unit == UNIT_FROM_FILE and ch.column is not None
        ):
            continue
        try:
            conversion(ch.unit, name, f"[channels.{name}] unit", fuel.density_kg_per_m3,
                       inp.standard_state if inp is not None else None)
        except ConfigError as exc:
            problems.append(str(exc))
            continue
        _, basis = split_basis(ch.unit)
        if basis is not None and ch.basis is not None and basis != ch.basis:
            problems.append(f"[channels.{name}] unit '{ch.unit}' says {basis}, but basis = "
                            f"\"{ch.basis}\"; make them agree.")
    if len(problems) == 1:
        raise ConfigError(f"{path}: {problems[0]}")
    if problems:
        raise ConfigError(f"{path}: {len(problems)} units are not right:\n  - "
                          + "\n  - ".join(problems))


def _check_checks(checks: dict[str, Any], path: Path) -> None:
    """Unknown or non-numeric ``[checks]`` keys, found at load time (the checks stage owns
    the list of keys)."""
    try:
        from .checks.settings import resolve_settings
    except ImportError:  # pragma: no cover - the checks stage is part of the package
        return
    try:
        resolve_settings(checks)
    except ConfigError as exc:
        raise ConfigError(f"{path}: {exc}") from None


def _parse_input(inp: Any, path: Path) -> InputOptions:
    """The ``[input]`` table: how to read the logger file."""
    _check_keys(inp, _INPUT_KEYS, "[input]", path)
    if "decimal" in inp and inp["decimal"] not in (".", ","):
        raise ConfigError(f"{path}: [input] decimal must be \".\" or \",\".")
    if "delimiter" in inp and (not isinstance(inp["delimiter"], str) or len(inp["delimiter"]) != 1):
        raise ConfigError(
            f"{path}: [input] delimiter must be one character, e.g. \",\" \";\" \"\\t\"."
        )
    if "units_row" in inp and not isinstance(inp["units_row"], bool):
        raise ConfigError(
            f"{path}: [input] units_row must be true or false, got {inp['units_row']!r}."
        )
    for key in ("encoding", "timezone"):
        if key in inp and not isinstance(inp[key], str):
            raise ConfigError(f"{path}: [input] {key} must be text, got {inp[key]!r}.")
    if "encoding" in inp:
        import codecs

        try:
            codecs.lookup(inp["encoding"])
        except LookupError:
            raise ConfigError(
                f"{path}: [input] encoding '{inp['encoding']}' is not a known text encoding; "
                "use e.g. \"utf-8\", \"utf-8-sig\" or \"cp1252\"."
            ) from None
    if "raster_s" in inp:
        raster = _number(inp["raster_s"], "[input] raster_s", path)
        if not raster > 0:
            raise ConfigError(f"{path}: [input] raster_s must be positive, got {raster!r}.")
    if "standard_temperature_degC" in inp:
        t_std = _number(inp["standard_temperature_degC"], "[input] standard_temperature_degC",
                        path)
        if not -50.0 <= t_std <= 50.0:
            raise ConfigError(f"{path}: [input] standard_temperature_degC must be between -50 "
                              f"and 50 degC, got {t_std!r}.")
    if "standard_pressure_kPa" in inp:
        p_std = _number(inp["standard_pressure_kPa"], "[input] standard_pressure_kPa", path)
        if not 50.0 <= p_std <= 150.0:
            raise ConfigError(f"{path}: [input] standard_pressure_kPa must be between 50 and "
                              f"150 kPa, got {p_std!r}.")
    return InputOptions(**inp)


def parse_config(raw: dict[str, Any], path: Path) -> Config:
    """Validate a parsed TOML document and resolve defaults."""
    _check_keys(raw, _TOP_KEYS, "the top level", path)
    run = raw.get("run", {})
    _check_keys(run, _RUN_KEYS, "[run]", path)
    if "fuel" not in raw:
        raise ConfigError(f"{path}: missing [fuel] table (preset = \"...\" or h_c = ...).")
    fuel = _parse_fuel(raw["fuel"], path)

    input_opts = _parse_input(raw.get("input", {}), path)

    channels_raw = raw.get("channels")
    if not isinstance(channels_raw, dict) or not channels_raw:
        raise ConfigError(f"{path}: missing [channels.<quantity>] tables.")
    channels: dict[str, Channel] = {}
    for name, table in channels_raw.items():
        if name not in INPUTS:
            raise ConfigError(
                f"{path}: unknown quantity [channels.{name}].{_hint(name, INPUTS)} "
                f"Known quantities: {', '.join(INPUTS)}."
            )
        channels[name] = _parse_channel(name, table, path)
    missing = [q for q in REQUIRED_CHANNELS if q not in channels]
    if missing:
        raise ConfigError(
            f"{path}: required channel(s) not mapped: {', '.join(missing)}. "
            "Add a [channels.<quantity>] table with column and unit for each."
        )
    by_column: dict[str, list[str]] = {}
    for name, ch in channels.items():
        if ch.column is not None:
            by_column.setdefault(ch.column.strip(), []).append(name)
    twice = {c: names for c, names in by_column.items() if len(names) > 1}
    if twice:
        c, names = next(iter(twice.items()))
        raise ConfigError(
            f"{path}: column '{c}' is mapped to {' and '.join(f'[channels.{n}]' for n in names)};"
            " one column measures one quantity: check which channel it is."
        )
    if "ambient_humidity" in channels and "intake_humidity" in channels:
        raise ConfigError(f"{path}: give either ambient_humidity or intake_humidity, not both.")

    _check_units(channels, fuel, path, input_opts)

    samp = raw.get("sampling", {})
    _check_keys(samp, _SAMPLING_KEYS, "[sampling]", path)
    sampling = Sampling(**{k: _number(v, f"[sampling].{k}", path) for k, v in samp.items()})

    extra_lambda = _parse_methods(raw.get("methods", {}), path)
    drift_correction = _parse_drift_correction(raw.get("drift_correction", {}), channels, path)
    ver = raw.get("verification", {})
    _check_keys(ver, _VERIFICATION_KEYS, "[verification]", path)
    verification = Verification(
        **{k: abs(_number(v, f"[verification].{k}", path)) for k, v in ver.items()}
    )

    checks = raw.get("checks", {})
    if not isinstance(checks, dict):
        raise ConfigError(f"{path}: [checks] must be a table.")
    _check_checks(checks, path)
    return Config(
        path=path,
        run_name=str(run.get("name", path.stem)),
        description=str(run.get("description", "")),
        fuel=fuel,
        input=input_opts,
        channels=channels,
        sampling=sampling,
        checks=dict(checks),
        extra_lambda=extra_lambda,
        drift_correction=drift_correction,
        verification=verification,
        raw=raw,
    )


def load_config(path: str | Path) -> Config:
    """Read and validate a cell config file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{path}: config file not found.") from None
    except IsADirectoryError:
        raise ConfigError(f"{path}: is a folder; give the config file (.toml).") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read the config file ({exc.strerror}).") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: config file is not UTF-8 text.") from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(_toml_error_message(path, text, exc)) from None
    return parse_config(raw, path)


def _toml_error_message(path: Path, text: str, exc: tomllib.TOMLDecodeError) -> str:
    """``file, line N: TOML syntax error: <reason>`` with the offending line quoted."""
    msg = str(exc)
    m = re.search(r"\(at line (\d+), column (\d+)\)", msg)
    if m is None:
        if "end of document" in msg:
            n_lines = text.count("\n") + 1
            m_line = n_lines
            reason = msg.split(" (at")[0]
            return f"{path}, line {m_line}: TOML syntax error: {reason} (at the end of the file)."
        return f"{path}: TOML syntax error: {msg}."
    line_no = int(m.group(1))
    reason = msg[: m.start()].strip()
    lines = text.splitlines()
    shown = lines[line_no - 1].strip() if 0 < line_no <= len(lines) else ""
    fix = ""
    if re.match(r"^[A-Za-z_][\w.-]*\s*=\s*[A-Za-z]", shown) and not re.search(
        r"=\s*(true|false|inf|nan)\b", shown
    ):
        fix = " Text values need quotes, e.g. unit = \"kg/h\"."
    elif shown.startswith("[") and not shown.endswith("]"):
        fix = " A table header needs a closing bracket, e.g. [channels.co2]."
    quoted = f" in '{shown}'" if shown else ""
    return f"{path}, line {line_no}: TOML syntax error{quoted}: {reason}.{fix}"
