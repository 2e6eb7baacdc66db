"""The one verdict engine: a verdict per instrument from the night's flags.

Run once, at the end of the checks stage, on the final flags table (every stage's flags,
sorted). The result is stored in the result file as the ``/verdicts`` table and every reader
(console, summary, figures, batch index) reads it from there; nothing downstream re-derives
a verdict. Wording and groupings come from :mod:`pipeline.instruments`.

Status of an instrument:

- ``suspect``: a drift or lambda-disagreement flag names it alone;
- ``shared suspect``: such a flag names it together with others the data cannot tell apart;
- ``attention``: another check names it (out of range, condensation risk);
- ``not enough data``: no flag names it, but the night holds too little steady, valid
  running to judge (``verdict_min_judged_s``);
- ``ok``: no flag names it (data gaps and not-sampling windows are listed, not judged).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import asdict, dataclass, field, fields
from datetime import datetime

import numpy as np
import pandas as pd

from ..instruments import (
    AVAILABILITY_CHECKS,
    FAULT_CHECKS,
    SEVERITY_RANK,
    STATUS_ORDER,
    SUSPECT_ESTIMATE,
    label,
)
from .timebase import describe_time, format_elapsed, make_clock

__all__ = ["VERDICT_COLUMNS", "Verdict", "console_lines", "headline", "judge",
           "verdicts_from_table", "verdicts_table"]


@dataclass
class Verdict:
    """The verdict on one instrument.

    instrument: canonical name; name: plain label; status: see the module docstring;
    suspect: the ``suspect`` of the lead flag (``|``-separated when shared), "" when ok;
    check: the lead flag's check; onset_s, end_s: time covered by the flags of the lead kind
    [s since start]; size_pct: the lead flag's value (a lambda shift in % for faults);
    reads_pct: what the shift means for the instrument's own reading in % (CO2 analyzer:
    1/(1 + shift) - 1; NaN when not defined); reads_abs: the same as an offset of the reading
    in mol/mol (O2 analyzer, from the balance's sensitivity of lambda_oxygen to O2); line:
    short phrase for the console;
    evidence: the plain sentence for the summary; flag_rows: rows of ``/flags`` behind it.
    """

    instrument: str
    name: str
    status: str
    suspect: str = ""
    check: str = ""
    onset_s: float = float("nan")
    end_s: float = float("nan")
    size_pct: float = float("nan")
    reads_pct: float = float("nan")
    reads_abs: float = float("nan")
    line: str = "ok"
    evidence: str = ""
    flag_rows: list[int] = field(default_factory=list)

    def as_dict(self) -> dict[str, object]:
        """Plain dict (JSON summary)."""
        return asdict(self)


#: Columns of the ``/verdicts`` table, in order.
VERDICT_COLUMNS = tuple(f.name for f in fields(Verdict))

_FLOAT_COLUMNS = ("onset_s", "end_s", "size_pct", "reads_pct", "reads_abs")

#: ``long_name`` of each column of the ``/verdicts`` table.
VERDICT_LONG_NAMES = {
    "instrument": "canonical instrument name",
    "name": "plain instrument name",
    "status": "verdict: suspect, shared suspect, attention or ok",
    "suspect": "suspect of the lead flag, |-separated when the data cannot tell which",
    "check": "check of the lead flag",
    "onset_s": "start of the flagged finding, time since start of run",
    "end_s": "end of the flagged finding, time since start of run",
    "size_pct": "value of the lead flag (lambda shift for drift and disagreement)",
    "reads_pct": "reading error of the instrument implied by the lambda shift",
    "reads_abs": "offset of the instrument's reading implied by the lambda shift (O2)",
    "line": "verdict as one console line",
    "evidence": "verdict as a plain sentence with its evidence",
    "flag_rows": "rows of /flags behind the verdict, ;-separated",
}


def _reads_pct(suspect: str, value_pct: float) -> float:
    """The reading error [%] of a suspect whose fault moved its lambda by ``value_pct``.

    lambda_carbon scales with 1/CO2 (carbon balance: fuel carbon over exhaust carbon,
    40 CFR 1065.655), so a shift s of lambda_carbon means CO2 reads 1/(1 + s) - 1.
    """
    if suspect == "co2" and np.isfinite(value_pct):
        s = value_pct / 100.0
        return 100.0 * (1.0 / (1.0 + s) - 1.0)
    return float("nan")


def _reads_abs(suspect: str, value_pct: float, sensitivity: Mapping[str, float] | None) -> float:
    """The reading offset [mol/mol] behind a lambda shift of ``value_pct``: ln(1 + s) over
    the sensitivity d ln(lambda) / d(reading) (O2 analyzer)."""
    sens = (sensitivity or {}).get(suspect, np.nan)
    if suspect != "o2" or not np.isfinite(value_pct) or not np.isfinite(sens) or sens == 0:
        return float("nan")
    return float(np.log1p(value_pct / 100.0) / sens)


def _fault_words(
    instrument: str, suspect: str, value: float, reads: float, reads_abs: float = np.nan
) -> str:
    """What a drift/disagreement of ``value`` % in lambda says about the instrument."""
    if not np.isfinite(value):
        return ""
    up = value > 0
    if suspect == "o2" and np.isfinite(reads_abs):
        return (f": it reads about {100 * abs(reads_abs):.2f} %vol "
                f"{'high' if reads_abs > 0 else 'low'}"
                f" (lambda_oxygen moved {value:+.1f} % against the other estimates)")
    if suspect == "co2" and np.isfinite(reads):
        return (f": it reads about {abs(reads):.1f} % {'high' if reads > 0 else 'low'}"
                f" (lambda_carbon moved {value:+.1f} % against the other estimates)")
    if suspect == "o2":
        return (f": it reads {'high' if up else 'low'}"
                f" (lambda_oxygen moved {value:+.1f} % against the other estimates)")
    if suspect == "air_mass_flow|fuel_mass_flow":
        return (f": the air meter reads {'high' if up else 'low'} or the fuel meter reads "
                f"{'low' if up else 'high'} by about {abs(value):.1f} % (lambda alone cannot "
                "tell which)")
    if instrument == "lambda_sensor" and suspect == "lambda_sensor":
        return f": it reads {'lean' if up else 'rich'} by {abs(value):.1f} %"
    est = SUSPECT_ESTIMATE.get(suspect) or SUSPECT_ESTIMATE.get(instrument, "")
    if est:
        return f" ({est} moved {value:+.1f} % against the other estimates)"
    return f" (size {value:+.1f} % in lambda)"


def _drift_shape(drift: pd.DataFrame | None, onset_s: float) -> str:
    """``; ramp shape, -0.80 %/h on residual_carbon_flow`` from the ``/drift`` table."""
    if drift is None or not len(drift) or "kind" not in drift or "onset_s" not in drift:
        return ""
    detected = (
        drift["detected"].to_numpy(dtype=float) > 0
        if "detected" in drift else np.ones(len(drift), bool)
    )
    hit = drift[detected & np.isclose(drift["onset_s"].to_numpy(float), onset_s, atol=1.0)]
    if not len(hit):
        return ""
    lead = hit.iloc[0]
    kind = str(lead.get("kind", "")) or "drift"
    rate = float(lead.get("rate_pct_per_h", np.nan))
    text = f"; {kind} shape"
    if np.isfinite(rate) and kind != "step":
        text += f", {rate:+.2f} %/h"
    return text + f" on {lead['residual']}"


def _span_text(seconds: float) -> str:
    hours = seconds / 3600.0
    return f"{hours:.1f} h" if hours >= 1 else f"{max(1, round(hours * 60))} min"


def judge(
    flags: pd.DataFrame,
    instruments: Sequence[str],
    *,
    drift: pd.DataFrame | None = None,
    start_time: datetime | None = None,
    end_s: float = float("nan"),
    sensitivity: Mapping[str, float] | None = None,
    judged_s: float = float("inf"),
    min_judged_s: float = 0.0,
) -> list[Verdict]:
    """One :class:`Verdict` per instrument from the final, sorted ``flags`` table.

    instruments: those that always get a verdict (the core instruments, the sensor when
    logged, the gases logged); any other instrument a flag names is added. drift: the
    ``/drift`` table (for the drift shape in the evidence); start_time: the run's start
    (UTC) for clock times; end_s: the last time of the run (a fault reaching it runs "to the
    end of the run"); sensitivity: d ln(lambda of its estimate) / d(reading) per instrument
    (the balance's ``o2_lambda_sensitivity`` for ``o2``), to state a fault in the
    instrument's own unit. Order: by status (:data:`~pipeline.instruments.STATUS_ORDER`),
    then in the order of ``instruments``. judged_s: seconds of steady, valid running the
    checks had; below ``min_judged_s`` an instrument without findings is "not enough data".
    """
    clock: Callable[[float], str] = make_clock(start_time) if start_time else format_elapsed
    n = len(flags)
    suspects = flags["suspect"].astype(str).to_numpy() if n else np.array([], dtype=object)
    parts = [[p for p in s.split("|") if p] for s in suspects]
    checks = flags["check"].astype(str).to_numpy() if n else np.array([], dtype=object)
    sev = (flags["severity"].astype(str).map(SEVERITY_RANK).fillna(0).to_numpy()
           if n else np.array([]))
    start = flags["start_s"].to_numpy(dtype=float) if n else np.array([])
    end = flags["end_s"].to_numpy(dtype=float) if n else np.array([])
    value = flags["value"].to_numpy(dtype=float) if n else np.array([])
    messages = flags["message"].astype(str).to_numpy() if n else np.array([], dtype=object)

    names = list(dict.fromkeys(instruments))
    for row in parts:
        names += [p for p in row if p != "time" and p not in names]

    def lead_first(rows: list[int]) -> list[int]:
        return sorted(rows, key=lambda i: (-sev[i], start[i]))

    out: list[Verdict] = []
    for name in names:
        lab = label(name)
        own = [i for i in range(n) if name in parts[i]]
        fault = lead_first([i for i in own if checks[i] in FAULT_CHECKS])
        other = lead_first(
            [i for i in own if checks[i] not in FAULT_CHECKS + AVAILABILITY_CHECKS]
        )
        gaps = [i for i in own if checks[i] in AVAILABILITY_CHECKS]
        if fault:
            i = fault[0]
            shared = len(parts[i]) > 1
            a, b = float(start[fault].min()), float(end[fault].max())
            reads = _reads_pct(suspects[i], value[i])
            reads_abs = _reads_abs(suspects[i], value[i], sensitivity)
            word = "drift" if checks[i] == "drift" else "disagreement"
            if np.isfinite(reads):
                size = f"reads {abs(reads):.1f} % {'high' if reads > 0 else 'low'}"
            elif np.isfinite(reads_abs):
                size = (f"reads {100 * abs(reads_abs):.2f} %vol "
                        f"{'high' if reads_abs > 0 else 'low'} ({value[i]:+.1f} % in lambda)")
            else:
                size = f"{value[i]:+.1f} % in lambda"
            extra = len(fault) + len(other) - 1
            line = (f"{word} {size} from {clock(start[i])}, flagged for "
                    f"{(end[i] - start[i]) / 3600.0:.1f} h, {'shared ' if shared else ''}suspect"
                    + (f" (+{extra} more flag{'s' if extra > 1 else ''})" if extra else ""))
            until = ("to the end of the run" if np.isfinite(end_s) and b >= end_s - 60.0
                     else f"until {clock(b)}")
            what = "drifted" if checks[i] == "drift" else "disagreed with the other instruments"
            evidence = (f"The {lab} {what} from {describe_time(start_time, a)} {until}"
                        + _fault_words(name, suspects[i], value[i], reads, reads_abs))
            if checks[i] == "drift":
                evidence += _drift_shape(drift, float(start[i]))
            evidence += "."
            if shared:
                others = [label(p) for p in parts[i] if p != name]
                evidence += f" Shared suspect with the {' and the '.join(others)}."
            if len(fault) > 1:
                evidence += f" {len(fault) - 1} further fault flag(s) name it."
            out.append(Verdict(
                name, lab, "shared suspect" if shared else "suspect", suspects[i], checks[i],
                a, b, float(value[i]), reads, reads_abs, line, evidence, fault + other,
            ))
        elif other:
            i = other[0]
            rows = [j for j in other if checks[j] == checks[i]]
            if checks[i] == "condensation_risk":
                v = value[i]
                where = f"{-v:.0f} K below" if v < 0 else f"only {v:.0f} K above"
                line = (f"condensation risk from {clock(start[i])} for "
                        f"{_span_text(end[i] - start[i])}: line {where} the dew point")
            else:
                line = (f"{checks[i].replace('_', ' ')} from {clock(start[i])} for "
                        f"{_span_text(end[i] - start[i])}")
            if len(other) > 1:
                line += f" (+{len(other) - 1} more flag{'s' if len(other) > 2 else ''})"
            msg = messages[i].strip() or checks[i]
            evidence = (f"The {lab} needs attention: {checks[i]} from "
                        f"{describe_time(start_time, float(start[i]))} ({msg.rstrip('.')}).")
            out.append(Verdict(
                name, lab, "attention", suspects[i], checks[i], float(start[rows].min()),
                float(end[rows].max()), float(value[i]), float("nan"), float("nan"), line,
                evidence, other,
            ))
        elif judged_s < min_judged_s:
            have = f"{judged_s / 60.0:.0f} min" if judged_s >= 60 else f"{judged_s:.0f} s"
            line = (f"not enough data to judge ({have} of steady valid running, needs "
                    f"{min_judged_s / 60.0:.0f} min)")
            evidence = (f"The {lab} cannot be judged: the night holds only {have} of steady, "
                        "valid running with the analyzers on exhaust.")
            out.append(Verdict(name, lab, "not enough data", line=line, evidence=evidence,
                               flag_rows=gaps))
        else:
            evidence = f"The {lab} agrees with the other instruments: no fault found."
            if gaps:
                evidence += f" No data during {len(gaps)} flagged interval(s) (see flags)."
            out.append(Verdict(name, lab, "ok", evidence=evidence, flag_rows=gaps))
    rank = {s: k for k, s in enumerate(STATUS_ORDER)}
    out.sort(key=lambda v: rank.get(v.status, len(rank)))
    return out


def headline(verdicts: Sequence[Verdict]) -> str:
    """The night in one sentence: the suspects, or that every instrument agrees."""
    suspects = [v for v in verdicts if v.status in ("suspect", "shared suspect")]
    if suspects and all(v.status == "shared suspect" for v in suspects):
        names = " or ".join(v.name for v in suspects)
        return f"Suspect: {names} (the data cannot tell which)."
    if suspects:
        return "Suspect: " + ", ".join(v.name for v in suspects) + "."
    if any(v.status == "attention" for v in verdicts):
        return "No instrument suspect; some need attention."
    if verdicts and all(v.status == "not enough data" for v in verdicts):
        return "Not enough steady, valid running to judge the instruments."
    return "All instruments agree: no instrument is suspect."


def verdicts_table(verdicts: Sequence[Verdict]) -> pd.DataFrame:
    """The ``/verdicts`` table: one row per verdict, columns :data:`VERDICT_COLUMNS`
    (``flag_rows`` as text, ``;``-separated row numbers of ``/flags``)."""
    rows = []
    for v in verdicts:
        d = v.as_dict()
        d["flag_rows"] = ";".join(str(i) for i in v.flag_rows)
        rows.append(d)
    df = pd.DataFrame(rows, columns=list(VERDICT_COLUMNS))
    for col in _FLOAT_COLUMNS:
        df[col] = df[col].astype("float64")
    for col in VERDICT_COLUMNS:
        if col not in _FLOAT_COLUMNS:
            df[col] = df[col].astype(str).astype(object)
    df.attrs["units"] = {"onset_s": "s", "end_s": "s", "size_pct": "percent",
                         "reads_pct": "percent", "reads_abs": "mol/mol"}
    df.attrs["long_names"] = dict(VERDICT_LONG_NAMES)
    return df


def verdicts_from_table(table: pd.DataFrame) -> list[Verdict]:
    """The verdicts of a ``/verdicts`` table read back (inverse of :func:`verdicts_table`)."""
    out = []
    for row in table.to_dict("records"):
        rows = [int(x) for x in str(row.get("flag_rows", "")).split(";") if x.strip()]
        kw = {k: row[k] for k in VERDICT_COLUMNS if k in row and k != "flag_rows"}
        for k in _FLOAT_COLUMNS:
            if k in kw:
                kw[k] = float(kw[k])
        out.append(Verdict(**{**kw, "flag_rows": rows}))
    return out


def console_lines(verdicts: Sequence[Verdict]) -> list[str]:
    """One console line per instrument: its canonical name and the verdict's line."""
    width = max((len(v.instrument) for v in verdicts), default=0)
    return [f"{v.instrument:<{width}}  {v.line}" for v in verdicts]
