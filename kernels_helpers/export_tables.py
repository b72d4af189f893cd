"""CSV tables of the results: one row per stage, per envelope fit, per leave-one-out refit.

Plain data in (the results JSON form, ``Results.to_dict()``), rows out; units are in the column
names (``tau_kpa``, ``x_mm``, ``phi_deg``). In US customary display units (:func:`in_units`) the
stress, length and force columns are converted and renamed alike (``tau_psf``, ``x_in``,
``normal_force_lbf``); angles, ratios and void ratios are the same in both. Numbers are written
at full precision (Python's shortest round-trip form) so that a table read back gives the results'
numbers exactly; a value that cannot be computed is an empty cell. Booleans are ``True``/``False``.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any, Final

from .decisions import Cohesion
from .display_units import SI, Display
from .results import Results

__all__ = [
    "ENVELOPE_COLUMNS",
    "SENSITIVITY_COLUMNS",
    "STAGE_COLUMNS",
    "TABLE_FILES",
    "envelope_rows",
    "in_units",
    "sensitivity_rows",
    "stage_rows",
    "table_text",
    "write_tables",
]

FLAG_SEPARATOR: Final = " | "

STAGE_COLUMNS: Final = (
    "id", "test_set", "stratum", "sigma_nominal_kpa", "normal_force_n", "e_initial", "included", "exclusion_reason",
    "peak_source", "peak_x_mm", "peak_tau_kpa", "peak_sigma_kpa", "peak_ratio", "peak_phi_secant_deg", "peak_e",
    "peak_dydx", "no_distinct_peak",
    "suggested_peak_x_mm", "suggested_peak_tau_kpa", "suggested_peak_sigma_kpa", "suggested_peak_phi_secant_deg",
    "cs_source", "cs_x_from_mm", "cs_x_to_mm", "cs_n_readings", "cs_tau_kpa", "cs_tau_sd_kpa", "cs_sigma_kpa",
    "cs_ratio", "cs_phi_secant_deg", "cs_e", "cs_dydx", "cs_ratio_trend_fraction",
    "residual_reached", "residual_tau_kpa", "residual_sigma_kpa", "flags",
)

ENVELOPE_COLUMNS: Final = (
    "group", "kind", "fit", "reported", "n", "dof", "phi_deg", "phi_ci_low_deg", "phi_ci_high_deg", "c_kpa",
    "c_ci_low_kpa", "c_ci_high_kpa", "level", "r2", "r2_definition", "residual_sd_kpa", "stage_ids", "not_fitted",
)

SENSITIVITY_COLUMNS: Final = (
    "group", "kind", "left_out", "n_left", "method", "phi_deg", "c_kpa", "phi_change_deg", "c_change_kpa",
    "phi_origin_deg", "phi_origin_change_deg",
)

#: the files ``write_tables`` writes: stages, envelopes, sensitivity
TABLE_FILES: Final = ("stages.csv", "envelopes.csv", "sensitivity.csv")


def _plain(results: Results | Mapping[str, Any]) -> Mapping[str, Any]:
    return results.to_dict() if isinstance(results, Results) else results


def stage_rows(results: Results | Mapping[str, Any]) -> list[dict[str, Any]]:
    """One row per stage (columns :data:`STAGE_COLUMNS`): inclusion, chosen and suggested peak,
    critical state, residual (reversal tests) and the flags joined by ``" | "``."""
    rows = []
    for s in _plain(results)["stages"]:
        peak, sug = s["peak"]["chosen"], s["peak"]["suggested"]
        cs = s["critical_state"]["chosen"]
        res = s.get("residual") or {}
        rows.append({
            "id": s["id"], "test_set": s["test_set"], "stratum": s["stratum"],
            "sigma_nominal_kpa": s["sigma_nominal_kpa"], "normal_force_n": s["normal_force_n"],
            "e_initial": s["e_initial"], "included": s["included"], "exclusion_reason": s["exclusion_reason"],
            "peak_source": s["peak"]["source"], "peak_x_mm": peak["x_mm"], "peak_tau_kpa": peak["tau_kpa"],
            "peak_sigma_kpa": peak["sigma_kpa"], "peak_ratio": peak["ratio"],
            "peak_phi_secant_deg": peak["phi_secant_deg"], "peak_e": peak["e"], "peak_dydx": peak["dydx"],
            "no_distinct_peak": s["peak"]["no_distinct_peak"] or "",
            "suggested_peak_x_mm": sug["x_mm"], "suggested_peak_tau_kpa": sug["tau_kpa"],
            "suggested_peak_sigma_kpa": sug["sigma_kpa"], "suggested_peak_phi_secant_deg": sug["phi_secant_deg"],
            "cs_source": s["critical_state"]["source"], "cs_x_from_mm": cs["x_from_mm"], "cs_x_to_mm": cs["x_to_mm"],
            "cs_n_readings": cs["n_readings"], "cs_tau_kpa": cs["tau_kpa"], "cs_tau_sd_kpa": cs["tau_sd_kpa"],
            "cs_sigma_kpa": cs["sigma_kpa"], "cs_ratio": cs["ratio"], "cs_phi_secant_deg": cs["phi_secant_deg"],
            "cs_e": cs["e"], "cs_dydx": cs["dydx"], "cs_ratio_trend_fraction": cs["ratio_trend_fraction"],
            "residual_reached": res.get("reached"), "residual_tau_kpa": res.get("tau_kpa"),
            "residual_sigma_kpa": res.get("sigma_kpa"), "flags": FLAG_SEPARATOR.join(s["flags"]),
        })
    return rows


def envelope_rows(results: Results | Mapping[str, Any]) -> list[dict[str, Any]]:
    """Two rows per envelope (columns :data:`ENVELOPE_COLUMNS`): the fit with c' free and the fit
    through the origin, ``reported`` True on the one that gives the reported c' and phi'. A fit that
    could not be made has empty numbers (``not_fitted`` says why)."""
    rows = []
    for e in _plain(results)["envelopes"]:
        for form in ("free", "origin"):
            f = e[form] or {}
            phi_ci, c_ci = f.get("phi_interval_deg") or (None, None), f.get("c_interval_kpa") or (None, None)
            rows.append({
                "group": e["group"], "kind": e["kind"], "fit": form,
                "reported": (e["reported"] == Cohesion.ORIGIN) == (form == "origin"),
                "n": f.get("n"), "dof": f.get("dof"), "phi_deg": f.get("phi_deg"),
                "phi_ci_low_deg": phi_ci[0], "phi_ci_high_deg": phi_ci[1], "c_kpa": f.get("c_kpa"),
                "c_ci_low_kpa": c_ci[0], "c_ci_high_kpa": c_ci[1], "level": f.get("level"), "r2": f.get("r2"),
                "r2_definition": f.get("r2_definition", ""), "residual_sd_kpa": f.get("residual_sd"),
                "stage_ids": FLAG_SEPARATOR.join(e["stage_ids"]),
                "not_fitted": (e["not_fitted"] or "") if f else (e["not_fitted"] or f"no {form} fit"),
            })
    return rows


def sensitivity_rows(results: Results | Mapping[str, Any]) -> list[dict[str, Any]]:
    """One row per leave-one-out refit (columns :data:`SENSITIVITY_COLUMNS`; angles deg, c' kPa)."""
    return [{k: r[k] for k in SENSITIVITY_COLUMNS} for r in _plain(results)["sensitivity"]]


_SUFFIX_QUANTITY: Final = {"_kpa": "stress", "_mm": "length", "_n": "force"}


def _column_in(name: str, u: Display) -> tuple[str, float]:
    """A column's name in display units and the factor of its values (1.0 when it has no unit)."""
    for suffix, quantity in _SUFFIX_QUANTITY.items():
        if name.endswith(suffix):
            return name[: -len(suffix)] + "_" + u.unit(quantity).lower(), u.factor(quantity)  # type: ignore[arg-type]
    return name, 1.0


def in_units(columns: Sequence[str], rows: Sequence[Mapping[str, Any]],
             u: Display) -> tuple[tuple[str, ...], list[dict[str, Any]]]:
    """The columns renamed for ``u`` and the rows' values converted; SI returns them as they are."""
    if u.is_si:
        return tuple(columns), [dict(r) for r in rows]
    named = {c: _column_in(c, u) for c in columns}
    out = [{named[c][0]: (r[c] * named[c][1] if isinstance(r[c], int | float) and not isinstance(r[c], bool)
                          and named[c][1] != 1.0 else r[c]) for c in columns} for r in rows]
    return tuple(named[c][0] for c in columns), out


def _cell(value: Any) -> Any:
    return "" if value is None else value  # csv writes floats as repr: the shortest exact round trip


def table_text(columns: Sequence[str], rows: Sequence[Mapping[str, Any]]) -> str:
    """CSV text (comma, header row, ``\\n`` line ends) of ``rows`` with ``columns``."""
    out = io.StringIO()
    w = csv.writer(out, lineterminator="\n")
    w.writerow(columns)
    w.writerows([_cell(r[c]) for c in columns] for r in rows)
    return out.getvalue()


def write_tables(results: Results | Mapping[str, Any], folder: str | Path, u: Display = SI) -> list[Path]:
    """Write ``stages.csv``, ``envelopes.csv`` and ``sensitivity.csv`` (UTF-8) into ``folder``
    (made if missing), in the display units ``u``; return their paths."""
    plain = _plain(results)
    target = Path(folder)
    target.mkdir(parents=True, exist_ok=True)
    tables = (
        (STAGE_COLUMNS, stage_rows(plain)),
        (ENVELOPE_COLUMNS, envelope_rows(plain)),
        (SENSITIVITY_COLUMNS, sensitivity_rows(plain)),
    )
    paths = []
    for name, (columns, rows) in zip(TABLE_FILES, tables, strict=True):
        path = target / name
        path.write_text(table_text(*in_units(columns, rows, u)), encoding="utf-8", newline="")
        paths.append(path)
    return paths
