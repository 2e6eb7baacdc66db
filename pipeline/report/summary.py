"""The one-page night summary: Markdown and PDF for people, JSON for machines.

Contents, in order: the verdict per instrument in plain words (suspects first), notes on data
availability (gaps, zero/span windows), the flags table, the key numbers, and the figures
written or skipped with the reason. Built from a read-back result only
(:func:`build_summary`), then written by :func:`write_markdown`, :func:`write_json` and
:func:`write_pdf` (matplotlib's PdfPages, no extra dependency).
"""

from __future__ import annotations

import json
import math
import textwrap
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np

from ..atomic import atomic_path
from ..checks.verdicts import headline
from ..instruments import AVAILABILITY_CHECKS
from ..result import ResultFile, provenance
from . import reportdata as rd

#: Page size of the PDF summary [in]: A4 portrait.
A4_IN = (8.27, 11.69)

#: Most flags listed in the Markdown/PDF table (all are in the JSON and the result file).
MAX_FLAG_ROWS = 12

#: Summary JSON schema version (bump on an incompatible change).
SCHEMA = 1


def _clean(v: Any) -> Any:
    """JSON-safe: NaN/inf -> None, numpy scalars -> Python, recursively."""
    if isinstance(v, dict):
        return {str(k): _clean(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_clean(x) for x in v]
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


#: Most flags of one check listed in the JSON summary (the result file holds them all).
JSON_FLAGS_PER_CHECK = 20


def _listed_flags(flags: Any) -> Any:
    """The flags the summaries list: instrument findings first, then data availability, each
    in time order, at most :data:`JSON_FLAGS_PER_CHECK` of one check."""
    if not len(flags):
        return flags
    avail = flags["check"].astype(str).isin(AVAILABILITY_CHECKS).to_numpy()
    ordered = flags.assign(_a=avail).sort_values(["_a", "start_s"], kind="stable")
    ordered = ordered.groupby("check", sort=False).head(JSON_FLAGS_PER_CHECK)
    return ordered.drop(columns="_a")


def build_summary(
    res: ResultFile, figures: list[Path] | None = None, skipped: dict[str, str] | None = None
) -> dict[str, Any]:
    """Everything the summary says, as a plain dict (also the JSON summary)."""
    run, prov = provenance(res)
    pts = rd.steady_point_stats(res)
    verdicts = rd.instrument_verdicts(res)
    flags = []
    for _, row in _listed_flags(res.flags).iterrows():
        flags.append(
            {
                "start_s": float(row["start_s"]),
                "end_s": float(row["end_s"]),
                "start": rd.clock(res, float(row["start_s"])),
                "end": rd.clock(res, float(row["end_s"])),
                "check": str(row["check"]),
                "suspect": str(row["suspect"]),
                "severity": str(row["severity"]),
                "value": float(row["value"]),
                "message": str(row["message"]),
            }
        )
    return _clean(
        {
            "schema": SCHEMA,
            "run": run,
            "provenance": prov,
            "description": str(res.attrs.get("run_description", "")),
            "start_time_utc": res.start_time.isoformat() if res.start_time else None,
            "source_file": res.attrs.get("source_file"),
            "source_sha256": res.attrs.get("source_sha256"),
            "tool_version": res.attrs.get("tool_version"),
            "result_file": res.path.name if res.path else None,
            "headline": headline(verdicts),
            # "sentence" is the evidence, under the key of summary schema 1
            "verdicts": [{**v.as_dict(), "sentence": v.evidence} for v in verdicts],
            "availability": rd.availability_notes(res),
            "flags": flags,
            "flag_counts": {str(k): int(v) for k, v in
                            res.flags["check"].astype(str).value_counts().items()},
            "flags_total": int(len(res.flags)),
            "key_numbers": rd.key_numbers(res, pts),
            "figures": [p.name for p in figures or []],
            "skipped_figures": dict(skipped or {}),
            "notes": [str(w) for w in res.attrs.get("warnings", []) or []]
            if isinstance(res.attrs.get("warnings"), list)
            else [],
        }
    )


def _num(v: Any, fmt: str, unit: str = "") -> str:
    return "\u2013" if v is None else fmt.format(v) + unit


def key_lines(s: dict[str, Any]) -> list[str]:
    """The key numbers as short plain lines."""
    k = s["key_numbers"]
    lines = [
        f"Run length {_num(k.get('duration_h'), '{:.1f}', ' h')}, {k.get('samples', 0)} samples, "
        f"{k.get('steady_points', 0)} steady points "
        f"({_num(100 * (k.get('steady_fraction') or 0), '{:.0f}', ' %')} of samples).",
    ]
    lams = [
        f"{n.removeprefix('lambda_')} {k[f'{n}_median']:.3f}"
        for n in ("lambda_flow", "lambda_carbon", "lambda_oxygen", "lambda_sensor")
        if k.get(f"{n}_median") is not None
    ]
    if lams:
        lines.append("Median lambda on valid samples: " + ", ".join(lams) + ".")
    lines.append(
        f"Consistency tolerance \u00b1{k['tolerance_pct']:g} % "
        f"(sensor \u00b1{k['tolerance_sensor_pct']:g} %), from the {k['tolerance_source']}."
    )
    if k.get("analyzer_delay_s") is not None:
        lines.append(
            f"Analyzer transport delay {k['analyzer_delay_s']:.1f} s "
            f"({k.get('analyzer_delay_method') or 'method not recorded'})."
        )
    if k.get("carbon_balance_error_pct_median") is not None:
        lines.append(
            "Carbon-balance error (40 CFR 1065.643, per steady point): median "
            f"{k['carbon_balance_error_pct_median']:+.2f} %, largest "
            f"{k['carbon_balance_error_pct_max_abs']:.2f} %."
        )
    mdd = k.get("min_detectable_drift_pct")
    if isinstance(mdd, dict) and mdd:
        vals = [v for v in mdd.values() if v is not None]
        if vals:
            span = f"{min(vals):.1f}" + (
                f"\u2013{max(vals):.1f}" if max(vals) - min(vals) >= 0.05 else ""
            )
            lines.append(
                f"Smallest detectable drift {span} % (per residual, from the night's own noise)."
            )
    if k.get("exhaust_dewpoint_max_degC") is not None:
        text = f"Exhaust dew point up to {k['exhaust_dewpoint_max_degC']:.1f} \u00b0C"
        if k.get("condensation_margin_min_K") is not None:
            text += f"; smallest sample-line margin {k['condensation_margin_min_K']:.1f} K"
        lines.append(text + ".")
    tot = []
    if k.get("fuel_used_kg") is not None:
        tot.append(f"fuel {k['fuel_used_kg']:.1f} kg")
    for sp, label in (("co2", "CO2"), ("co", "CO"), ("nox", "NOx"), ("thc", "THC")):
        v = k.get(f"{sp}_total_g")
        if v is not None:
            tot.append(f"{label} {v / 1000:.2f} kg" if v >= 1000 else f"{label} {v:.0f} g")
    if tot:
        lines.append("Night totals: " + ", ".join(tot) + ".")
    return lines


def _counts_text(s: dict[str, Any]) -> str:
    return ", ".join(f"{n} {k}" for k, n in s.get("flag_counts", {}).items())


def _flag_rows(s: dict[str, Any]) -> list[list[str]]:
    rows = []
    for f in s["flags"][:MAX_FLAG_ROWS]:
        value = "" if f["value"] is None else f"{f['value']:.3g}"
        rows.append(
            [f["start"], f["end"], f["check"], f["suspect"].replace("|", ", ") or "\u2013",
             f["severity"], value]
        )
    return rows


def markdown(s: dict[str, Any]) -> str:
    """The summary as Markdown text."""
    out = [f"# Night summary \u2014 {s['run']}", "", f"*{s['provenance']}*", ""]
    if s["description"]:
        out += [s["description"], ""]
    out += [f"**{s['headline']}**", "", "## Verdict per instrument", ""]
    for v in s["verdicts"]:
        out.append(f"- **{v['name']}: {v['status'].upper()}.** {v['sentence']}")
    if s["availability"]:
        out += ["", "## Data availability", ""]
        out += [f"- {n}" for n in s["availability"]]
    out += ["", "## Flags", ""]
    if s["flags"]:
        out += ["| from | to | check | suspect | severity | value |", "|---|---|---|---|---|---|"]
        out += ["| " + " | ".join(r) + " |" for r in _flag_rows(s)]
        if s["flags_total"] > MAX_FLAG_ROWS:
            out.append(f"\n{s['flags_total'] - MAX_FLAG_ROWS} more flags in the result file "
                       "(/flags); counts by check: " + _counts_text(s) + ".")
        out += ["", "Messages:", ""]
        out += [f"{i + 1}. {f['message']}" for i, f in enumerate(s["flags"][:MAX_FLAG_ROWS])]
    else:
        out.append("No flags.")
    out += ["", "## Key numbers", ""] + [f"- {line}" for line in key_lines(s)]
    out += ["", "## Figures", ""]
    out += [f"- `{name}`" for name in s["figures"]] or ["- none (figures not requested)"]
    out += [f"- {name}: skipped \u2014 {why}" for name, why in s["skipped_figures"].items()]
    if s["notes"]:
        out += ["", "## Notes from reading the log", ""] + [f"- {n}" for n in s["notes"]]
    out += ["", f"Result file: `{s['result_file']}`; source SHA-256 `{s['source_sha256']}`."]
    return "\n".join(out) + "\n"


def write_markdown(s: dict[str, Any], path: Path) -> Path:
    """Write the Markdown summary."""
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_text(markdown(s), encoding="utf-8")
    return path


def write_json(s: dict[str, Any], path: Path) -> Path:
    """Write the JSON summary (UTF-8, sorted keys, NaN as null)."""
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_text(json.dumps(s, indent=2, sort_keys=True, ensure_ascii=False) + "\n",
                    encoding="utf-8")
    return path


class _Page:
    """A text cursor on one A4 page (inches from the top), wrapping by character count."""

    def __init__(self, fig: Any) -> None:
        self.fig = fig
        self.y = 0.55
        self.left = 0.6
        self.width = A4_IN[0] - 2 * self.left

    def _baseline(self, size: float) -> float:
        """Baseline of a line whose top is at the cursor, as a fraction of the page height.
        Lines are placed by their baseline, not by the top of their ink, so lines with and
        without tall glyphs keep the same spacing (in every font)."""
        return (self.y + 0.8 * size / 72) / A4_IN[1]

    def text(self, s: str, size: float = 8.5, weight: str = "normal", indent: float = 0.0,
             color: str = "#111111", gap: float = 0.04, style: str = "normal") -> None:
        chars = max(20, int((self.width - indent) * 72 / (size * 0.55)))
        for line in textwrap.wrap(s, chars) or [""]:
            if self.y > A4_IN[1] - 0.45:
                return
            self.fig.text((self.left + indent) / A4_IN[0], 1 - self._baseline(size), line,
                          fontsize=size, weight=weight, color=color, va="baseline",
                          style=style)
            self.y += size * 1.32 / 72
        self.y += gap

    def table(self, header: list[str], rows: list[list[str]], widths: list[float]) -> None:
        size = 7.5
        x = self.left
        xs = []
        for w in widths:
            xs.append(x)
            x += w
        for r, row in enumerate([header, *rows]):
            if self.y > A4_IN[1] - 0.5:
                return
            for xi, cell, w in zip(xs, row, widths, strict=True):
                chars = max(4, int(w * 72 / (size * 0.55)))
                cell = cell if len(cell) <= chars else cell[: chars - 1] + "\u2026"
                self.fig.text(xi / A4_IN[0], 1 - self._baseline(size), cell, fontsize=size,
                              weight="bold" if r == 0 else "normal", va="baseline")
            self.y += size * 1.4 / 72
        self.y += 0.06


def write_pdf(s: dict[str, Any], path: Path) -> Path:
    """Write the one-page PDF summary (A4 portrait, matplotlib PdfPages, reproducible)."""
    from matplotlib.backends.backend_pdf import PdfPages
    from matplotlib.figure import Figure

    path = Path(path)
    fig = Figure(figsize=A4_IN)
    p = _Page(fig)
    p.text(f"Night summary \u2014 {s['run']}", size=15, weight="bold", gap=0.02)
    p.text(s["provenance"], size=7.5, color="#333333")
    if s["description"]:
        p.text(s["description"], size=8.5, color="#333333", gap=0.08)
    p.text(s["headline"], size=11, weight="bold", gap=0.1)
    p.text("Verdict per instrument", size=11, weight="bold")
    for v in s["verdicts"]:
        p.text(f"{v['name']}: {v['status'].upper()}", size=8.5, weight="bold", gap=0.0)
        p.text(v["sentence"], size=8.5, indent=0.2, gap=0.05)
    if s["availability"]:
        p.text("Data availability", size=11, weight="bold")
        for n in s["availability"]:
            p.text("\u2022 " + n, size=8.5, indent=0.1, gap=0.0)
        p.y += 0.08
    p.text("Flags", size=11, weight="bold")
    if s["flags"]:
        p.table(["from", "to", "check", "suspect", "severity", "value"], _flag_rows(s),
                [0.85, 0.85, 1.65, 2.2, 0.8, 0.7])
        if s["flags_total"] > MAX_FLAG_ROWS:
            p.text(f"{s['flags_total'] - MAX_FLAG_ROWS} more flags in the result file: "
                   + _counts_text(s) + ".",
                   size=8)
    else:
        p.text("No flags.", size=8.5)
    p.text("Key numbers", size=11, weight="bold")
    for line in key_lines(s):
        p.text("\u2022 " + line, size=8.5, indent=0.1, gap=0.0)
    p.y += 0.08
    p.text("Figures", size=11, weight="bold")
    names = ", ".join(s["figures"]) if s["figures"] else "none (figures not requested)"
    p.text(names, size=7.5, gap=0.02)
    for name, why in s["skipped_figures"].items():
        p.text(f"skipped {name}: {why}", size=7.5, gap=0.0)
    meta = {"Title": f"dynoqc night summary: {s['run']}", "Creator": None, "Producer": None,
            "CreationDate": None}
    with atomic_path(path) as tmp, _pdf_fonts(fig), PdfPages(tmp, metadata=meta) as pdf:
        pdf.savefig(fig)
    return path


def _core_font_text(fig: Any) -> bool:
    """True when every text of ``fig`` is in the Windows-1252 set of the PDF core fonts."""
    try:
        for t in fig.texts:
            t.get_text().encode("cp1252")
    except UnicodeEncodeError:
        return False
    return True


@contextmanager
def _pdf_fonts(fig: Any) -> Iterator[None]:
    """Text of the page in the PDF core font Helvetica (not embedded: every PDF reader has
    it; the page is written in a tenth of the time and is a few kB) when all of it is in
    that font's character set, else in the embedded default font (e.g. a cell description in
    Greek or CJK script)."""
    import logging

    import matplotlib

    if not _core_font_text(fig):
        yield
        return
    log = logging.getLogger("matplotlib.font_manager")
    level = log.level
    log.setLevel(logging.ERROR)  # "Helvetica: weight normal not found, using medium" notes
    try:
        with matplotlib.rc_context({"pdf.use14corefonts": True}):
            yield
    finally:
        log.setLevel(level)
