"""AGS4 export of the shear box results: groups SHBG (one row per specimen) and SHBT (one per stage).

AGS4 is the open geotechnical data-exchange format. Headings, units, data types and parent groups
are read from the AGS4 standard dictionary (edition 4.1.1) shipped with python-ags4, and numbers
are formatted to their TYPE with python-ags4's own formatter, so the file passes its checker
(``python_ags4.AGS4.check_file``). The file also holds the PROJ, TRAN, UNIT, TYPE and ABBR groups and
the LOCA and SAMP parents. Sample and specimen identification come from ``[stage.sample]`` in the
project file; a stage without it stops the export with the field to add. The mapping of every
heading is in the contributor guide ("Results exchange").
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import math
import unicodedata
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Any, Final

import numpy as np
import pandas as pd

from .decisions import Interpretation, PickKind
from .errors import ProjectFileError, ShearbookError
from .project import PROJECT_FILE, Project, SampleSpec, StageSpec
from .results import EnvelopeResult, Results, StageResult

__all__ = [
    "AGS_EDITION", "PARAMETER_CAUTION", "REQUIRED_SAMPLE_FIELDS", "ags4_text", "ascii_text", "standard_dictionary",
    "write_ags4",
]

AGS_EDITION: Final = "4.1.1"
GROUPS: Final = ("PROJ", "TRAN", "UNIT", "TYPE", "ABBR", "LOCA", "SAMP", "SHBG", "SHBT")
REQUIRED_SAMPLE_FIELDS: Final = ("location_id", "sample_top_m", "sample_ref", "sample_type", "specimen_ref",
                                 "specimen_depth_m")
LARGE_BOX_MM: Final = 150.0  # a box wider than this is a "LARGE SBOX" (small boxes are 60-100 mm; common practice)
PARAMETER_CAUTION: Final = "Parameters need engineering judgement; local codes govern."
_CONDITION: Final = {"undisturbed": "UNDISTURBED", "remoulded": "REMOULDED"}
_ASCII: Final = {"\u2032": "'", "\u2019": "'", "\u2018": "'", "\u201c": '"', "\u201d": '"', "\u00b0": " deg",
                 "\u00b1": "+/-", "\u2264": "<=", "\u2265": ">=", "\u2013": "-", "\u2014": "-", "\u2212": "-",
                 "\u00d7": "x", "\u03c6": "phi", "\u03c3": "sigma", "\u03c4": "tau", "\u03c8": "psi",
                 "\u0394": "delta", "\u221a": "sqrt", "\u00b2": "^2", "\u00b5": "u", "\u03bc": "u", "\u2026": "...",
                 "\u00b7": ".", "\u00a0": " "}


@dataclass(frozen=True)
class AgsDictionary:
    """What the export needs from the AGS4 standard dictionary."""

    headings: Mapping[str, tuple[tuple[str, str, str, str], ...]]  # group -> (heading, status, type, unit), in order
    parents: Mapping[str, str]
    abbreviations: Mapping[tuple[str, str], str]  # (heading, code) -> description
    units: Mapping[str, str]
    types: Mapping[str, str]


@lru_cache(maxsize=1)
def standard_dictionary() -> AgsDictionary:
    """The AGS4 standard dictionary (edition :data:`AGS_EDITION`) as shipped with python-ags4."""
    from python_ags4 import AGS4, check

    tables, _ = AGS4.AGS4_to_dataframe(check.pick_standard_dictionary(dict_version=AGS_EDITION))
    d = tables["DICT"][tables["DICT"]["HEADING"] == "DATA"]
    headings: dict[str, list[tuple[str, str, str, str]]] = {}
    parents = {}
    for r in d.itertuples():
        if r.DICT_TYPE == "GROUP":
            parents[r.DICT_GRP] = r.DICT_PGRP
        else:
            headings.setdefault(r.DICT_GRP, []).append((r.DICT_HDNG, r.DICT_STAT, r.DICT_DTYP, r.DICT_UNIT))
    data = {k: tables[k][tables[k]["HEADING"] == "DATA"] for k in ("ABBR", "UNIT", "TYPE")}
    return AgsDictionary(
        headings={g: tuple(h) for g, h in headings.items()},
        parents=parents,
        abbreviations={(r.ABBR_HDNG, r.ABBR_CODE): r.ABBR_DESC for r in data["ABBR"].itertuples()},
        units={r.UNIT_UNIT: r.UNIT_DESC for r in data["UNIT"].itertuples()},
        types={r.TYPE_TYPE: r.TYPE_DESC for r in data["TYPE"].itertuples()},
    )


def ascii_text(text: str) -> str:
    """Text in plain ASCII, as AGS4 rule 1 asks (primes, degrees, Greek letters spelt out)."""
    text = "".join(_ASCII.get(ch, ch) for ch in text)
    text = "".join(ch for ch in unicodedata.normalize("NFKD", text) if not unicodedata.combining(ch))
    return text.encode("ascii", "replace").decode("ascii")


# -- rows ---------------------------------------------------------------------------------------


def _spec_of(project: Project, stage_id: str) -> StageSpec:
    try:
        return project.stage(stage_id)
    except KeyError:  # a stage of a multi-stage test is "ID/k"
        return project.stage(stage_id.rsplit("/", 1)[0])


def _sample(project: Project, spec: StageSpec, ags: AgsDictionary) -> SampleSpec:
    where = f"{project.root / PROJECT_FILE}: stage {spec.id!r}"
    s = spec.sample or SampleSpec()
    missing = [f for f in REQUIRED_SAMPLE_FIELDS if getattr(s, f) in (None, "")]
    if missing:
        raise ProjectFileError(
            f"{where}: the AGS4 export needs the sample field(s) {', '.join(missing)}. Add them to the stage's "
            "[stage.sample] table (or to [stage_defaults.sample]), e.g. location_id = \"BH03\", sample_top_m = 4.20, "
            "sample_ref = \"12\", sample_type = \"B\", specimen_ref = \"D1\", specimen_depth_m = 4.20."
        )
    codes = sorted(c for h, c in ags.abbreviations if h == "SAMP_TYPE")
    if s.sample_type not in codes:
        raise ProjectFileError(f"{where}: [stage.sample] sample_type {s.sample_type!r} is not an AGS4 SAMP_TYPE code; "
                               f"use one of {', '.join(codes)}.")
    return s


def _samp_key(s: SampleSpec) -> dict[str, Any]:
    return {"LOCA_ID": ascii_text(s.location_id or ""), "SAMP_TOP": s.sample_top_m,
            "SAMP_REF": ascii_text(s.sample_ref or ""), "SAMP_TYPE": s.sample_type, "SAMP_ID": ascii_text(s.sample_id)}


def _spec_key(s: SampleSpec) -> dict[str, Any]:
    return _samp_key(s) | {"SPEC_REF": ascii_text(s.specimen_ref or ""), "SPEC_DPTH": s.specimen_depth_m}


def _key_text(key: Mapping[str, Any]) -> tuple[str, ...]:
    return tuple(f"{v:.2f}" if isinstance(v, float) else str(v) for v in key.values())  # depths are 2DP


def _fit_words(env: EnvelopeResult | None) -> str:
    if env is None:
        return "none"
    fit = env.chosen
    if fit is None:
        return f"not fitted ({env.not_fitted})"
    form = "c' = 0, through the origin" if fit.through_origin else "c' free"
    lo, hi = fit.phi_interval_deg
    return (f"linear regression of tau on sigma'n ({form}) over {fit.n} stages ({', '.join(env.stage_ids)}): "
            f"phi' {fit.phi_deg:.1f} deg ({fit.level * 100:g} % interval {lo:.1f} to {hi:.1f}), "
            f"c' {fit.intercept:.1f} kPa")


def _envelope(results: Results, group: str, kind: PickKind) -> EnvelopeResult | None:
    try:
        return results.envelope(group, kind)
    except KeyError:
        return None


def _shbg_row(results: Results, s: SampleSpec, spec: StageSpec, group: str, version: str) -> dict[str, Any]:
    peak, res = _envelope(results, group, "peak"), _envelope(results, group, "residual")
    cs = _envelope(results, group, "critical_state")
    remark = [f"Test set {group!r}", f"peak: {_fit_words(peak)}", f"critical state: {_fit_words(cs)}"]
    if res is not None:
        remark.append(f"residual: {_fit_words(res)}")
    remark += [f"stresses on the {results.conventions['area']} area", "vertical displacement positive for dilation",
               f"interpreted with Shearbook {version}", PARAMETER_CAUTION]
    meta = results.project
    return _spec_key(s) | {
        "SPEC_DESC": s.description,
        "SHBG_TYPE": "LARGE SBOX" if spec.specimen.width_mm > LARGE_BOX_MM else "SMALL SBOX",
        "SHBG_COND": _CONDITION.get(s.condition, ""),
        "SHBG_PCOH": peak.chosen.intercept if peak is not None and peak.chosen else None,
        "SHBG_PHI": peak.chosen.phi_deg if peak is not None and peak.chosen else None,
        "SHBG_RCOH": res.chosen.intercept if res is not None and res.chosen else None,
        "SHBG_RPHI": res.chosen.phi_deg if res is not None and res.chosen else None,
        "SHBG_REM": "; ".join(remark),
        "SHBG_METH": str(meta.get("test_method", "Direct shear box; method not stated ([project] test_method)")),
        "SHBG_LAB": str(meta.get("laboratory", "")),
    }


def _rate_mm_min(st: StageResult) -> float | None:
    if st.rate is not None:
        return st.rate.rate_mm_min
    c = st.reduced.curve
    c = c[c["in_shear"] & (c["pass_no"] == 1)]
    if len(c) < 2 or not np.isfinite(c["time_s"].to_numpy()).all() or np.ptp(c["time_s"].to_numpy()) <= 0:
        return None
    rate = float(np.polyfit(c["time_s"].to_numpy() / 60.0, c["x_mm"].to_numpy(), 1)[0])
    return rate if math.isfinite(rate) and rate > 0 else None


def _shbt_row(st: StageResult, spec: StageSpec, s: SampleSpec, settings: Mapping[str, Any]) -> dict[str, Any]:
    sp, p, cs, curve = spec.specimen, st.peak.chosen, st.critical_state.chosen, st.reduced.curve
    rho_d = sp.dry_mass_g / (sp.area0_mm2 * sp.height_mm) * 1000.0  # g/mm3 -> Mg/m3
    by_ratio = settings["picks"].get("peak_rule") == "ratio"
    rule = "maximum stress ratio tau/sigma'" if by_ratio else "maximum shear stress"
    crit = (f"peak: {rule} (suggested)" if st.peak.source == "suggested" else "peak: picked by the engineer") + (
        f"; critical state: mean over {cs.x_from_mm:.2f}-{cs.x_to_mm:.2f} mm ({st.critical_state.source})")
    remark = [f"critical state tau {cs.tau_kpa:.1f} kPa at sigma' {cs.sigma_kpa:.1f} kPa (tau/sigma' {cs.ratio:.3f}, "
              f"phi' secant {math.degrees(math.atan(cs.ratio)):.1f} deg, e {cs.e:.3f}, dy/dx {cs.dydx:.4f})"]
    if st.no_distinct_peak:
        remark.append(f"no distinct peak ({st.no_distinct_peak}): not used in the peak envelope")
    if not st.included:
        remark.append(f"excluded from the envelopes: {st.exclusion_reason}")
    row = _spec_key(s) | {
        "SHBT_TESN": st.stage_id,
        "SHBT_BDEN": rho_d * (1 + sp.water_content_pct / 100.0) if sp.water_content_pct is not None else None,
        "SHBT_DDEN": rho_d, "SHBT_NORM": st.sigma_nominal_kpa, "SHBT_DISP": _rate_mm_min(st),
        "SHBT_PEAK": p.tau_kpa, "SHBT_PDIS": p.x_mm,
        "SHBT_PDIN": float(curve["y_mm"].to_numpy()[curve.index.get_loc(p.index)]),
        "SHBT_PDEN": f"{sp.gs:g}", "SHBT_IVR": st.reduced.e_initial,
        "SHBT_MCI": f"{sp.water_content_pct:g}" if sp.water_content_pct is not None else "",
        "SHBT_HGT": sp.height_mm, "SHBT_CRIT": crit, "SHBT_PVST": p.sigma_kpa,
    }
    if st.passes:
        row["SHBT_REVS"] = float(len(st.passes))
    r = None if st.residual is None else st.residual.chosen
    if r is not None and r.reached and r.passes is not None:
        last = r.passes[1]
        row |= {"SHBT_RES": r.tau_kpa, "SHBT_RVST": r.sigma_kpa,
                "SHBT_RDIS": sum(q.travel_mm for q in st.passes if q.pass_no <= last),
                "SHBT_RDIN": float(curve.loc[curve["pass_no"] == last, "y_mm"].iloc[-1])}
    elif r is not None:
        remark.append(r.message)
    remark += list(st.flags)
    row["SHBT_REM"] = "; ".join(remark)
    return row


def _rows(project: Project, results: Results, interpretation: Interpretation, date: str,
          ags: AgsDictionary) -> dict[str, list[dict[str, Any]]]:
    version = str(results.provenance.get("versions", {}).get("kernels_helpers", ""))
    meta = results.project
    rows: dict[str, list[dict[str, Any]]] = {g: [] for g in GROUPS}
    memo = " ".join(str(x) for x in (meta.get("description", ""),
                                     "Invented data." if meta.get("invented_data") else "") if x)
    rows["PROJ"].append({"PROJ_ID": str(meta.get("reference") or meta.get("name")),
                         "PROJ_NAME": str(meta.get("name", "")),
                         "PROJ_LOC": str(meta.get("site", "")), "PROJ_CLNT": str(meta.get("client", "")),
                         "PROJ_MEMO": memo})
    state = interpretation.signoff.state.capitalize()
    rows["TRAN"].append({"TRAN_ISNO": "1", "TRAN_DATE": date, "TRAN_PROD": str(meta.get("laboratory") or "Shearbook"),
                         "TRAN_STAT": state, "TRAN_AGS": AGS_EDITION,
                         "TRAN_DESC": f"Shear box results interpreted with Shearbook {version} (interpretation SHA-256 "
                                      f"{results.provenance.get('interpretation_sha256', '')})",
                         "TRAN_RECV": str(meta.get("recipient") or meta.get("client") or "Not stated"),
                         "TRAN_DLIM": "|", "TRAN_RCON": "+", "TRAN_REM": PARAMETER_CAUTION})
    seen: dict[str, dict[tuple[str, ...], Any]] = {"LOCA": {}, "SAMP": {}, "SHBG": {}}
    for st in results.stages:
        spec = _spec_of(project, st.stage_id)
        s = _sample(project, spec, ags)
        group = st.test_set or "all stages"
        seen["LOCA"].setdefault((s.location_id or "",), {"LOCA_ID": ascii_text(s.location_id or "")})
        seen["SAMP"].setdefault(_key_text(_samp_key(s)), _samp_key(s))
        key = _key_text(_spec_key(s))
        if key in seen["SHBG"]:
            other, other_group, _ = seen["SHBG"][key]
            if other_group != group:
                raise ProjectFileError(
                    f"{project.root / PROJECT_FILE}: stages {other!r} and {st.stage_id!r} share one specimen in "
                    f"[stage.sample] ({', '.join(key)}) but belong to different test sets "
                    f"({other_group!r}, {group!r}); "
                    "give each specimen its own specimen_ref.")
        else:
            seen["SHBG"][key] = (st.stage_id, group, _shbg_row(results, s, spec, group, version))
        rows["SHBT"].append(_shbt_row(st, spec, s, results.settings))
    rows["LOCA"] = list(seen["LOCA"].values())
    rows["SAMP"] = list(seen["SAMP"].values())
    rows["SHBG"] = [dict(r, TEST_STAT=state) for _, _, r in seen["SHBG"].values()]
    return rows


# -- text ---------------------------------------------------------------------------------------


def _empty(value: Any) -> bool:
    return value is None or value == "" or (isinstance(value, float) and not math.isfinite(value))


def _table(group: str, rows: Sequence[Mapping[str, Any]], ags: AgsDictionary) -> list[list[str]]:
    """HEADING, UNIT, TYPE and DATA lines of one group: key and required headings always, others when used."""
    used = [h for h in ags.headings[group]
            if "KEY" in h[1].upper() or "REQUIRED" in h[1].upper() or any(not _empty(r.get(h[0])) for r in rows)]
    names = [h[0] for h in used]
    frame = pd.DataFrame(
        [["UNIT", *(h[3] for h in used)], ["TYPE", *(h[2] for h in used)]]
        + [["DATA", *(None if _empty(r.get(n)) else r.get(n) for n in names)] for r in rows],
        columns=["HEADING", *names], dtype=object,
    )
    from python_ags4 import AGS4  # its formatter: the file is checked by the same library

    for name, _, dtype, _ in used:
        if dtype.endswith("SF"):  # round first: the formatter gives 0.100 for 0.09999 at 2SF, which its checker refuses
            digits = int(dtype[:-2])
            frame.loc[2:, name] = [None if v is None else float(f"{v:.{digits - 1}e}") for v in frame.loc[2:, name]]
        if any(t in dtype for t in ("DP", "SF", "SCI")):
            frame = AGS4.format_numeric_column(frame, name, dtype)
    text = [["" if _empty(v) else ascii_text(str(v)) for v in row] for row in frame.itertuples(index=False)]
    return [["GROUP", group], ["HEADING", *names], *text]


def _reference_rows(tables: Mapping[str, list[list[str]]], abbr_rows: Sequence[Mapping[str, Any]],
                    ags: AgsDictionary) -> dict[str, list[dict[str, Any]]]:
    """UNIT and TYPE rows for every unit and type the other groups use (descriptions from the dictionary)."""
    units = sorted({u for t in tables.values() for u in t[2][1:] if u})
    types = sorted({ty for t in tables.values() for ty in t[3][1:]} | {"X"})
    return {"UNIT": [{"UNIT_UNIT": u, "UNIT_DESC": ags.units[u]} for u in units],
            "TYPE": [{"TYPE_TYPE": ty, "TYPE_DESC": ags.types[ty]} for ty in types],
            "ABBR": [dict(r) for r in abbr_rows]}


def ags4_text(project: Project, results: Results, interpretation: Interpretation, date: str | None = None) -> str:
    """The AGS4 file (CRLF line ends, ASCII) of ``results``; ``date`` (yyyy-mm-dd, default today UTC) is TRAN_DATE.

    Raises
    ------
    ProjectFileError
        Naming the stage and the ``[stage.sample]`` field to add when one is missing or wrong.
    """
    date = date or dt.datetime.now(dt.UTC).date().isoformat()
    try:
        dt.date.fromisoformat(date)
    except ValueError:
        raise ShearbookError(
            f"AGS4 export: the date {date!r} is not a date written yyyy-mm-dd (e.g. 2026-12-01).") from None
    ags = standard_dictionary()
    rows = _rows(project, results, interpretation, date, ags)
    tables = {g: _table(g, rows[g], ags) for g in GROUPS if g not in ("UNIT", "TYPE", "ABBR")}
    codes = {(name, row[i]) for t in tables.values() for i, name in enumerate(t[1][1:], start=1) if t[3][i] == "PA"
             for row in t[4:] if row[i]}
    abbr = [{"ABBR_HDNG": name, "ABBR_CODE": code, "ABBR_DESC": ags.abbreviations[(name, code)]}
            for name, code in sorted(codes)]
    for g, r in _reference_rows(tables, abbr, ags).items():
        tables[g] = _table(g, r, ags)
    out = io.StringIO()
    w = csv.writer(out, quoting=csv.QUOTE_ALL, lineterminator="\r\n")
    for g in GROUPS:
        w.writerows(tables[g])
        out.write("\r\n")
    return out.getvalue()


def write_ags4(project: Project, results: Results, interpretation: Interpretation, path: str | Path,
               date: str | None = None) -> Path:
    """Write :func:`ags4_text` to ``path`` (ASCII, CRLF); return the path."""
    target = Path(path)
    target.write_bytes(ags4_text(project, results, interpretation, date).encode("ascii"))
    return target
