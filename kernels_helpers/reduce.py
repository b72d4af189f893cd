"""Reduction of a stage's readings: areas, stresses, void ratio and rate of dilation.

Pure functions: plain arrays and records in, plain arrays and records out. Units: mm, N, kPa, g.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd
from scipy.signal import savgol_filter

from .checks import hampel_spikes
from .errors import ReadingsError
from .project import Specimen, StageSpec
from .readings import StageReadings
from .reversal import label_passes
from .settings import AreaConvention, ReductionSettings

__all__ = [
    "ReducedStage",
    "ReductionSettings",
    "corrected_area_mm2",
    "dilation_rate",
    "dry_density_mg_m3",
    "height_mm",
    "height_of_solids_mm",
    "reduce_stage",
    "seating_shift_mm",
    "settlement_of",
    "smooth_on_x",
    "stresses_kpa",
    "void_ratio",
]



def corrected_area_mm2(shape: str, width_mm: float, d_mm: np.ndarray | float) -> np.ndarray:
    """Contact area between the two halves of the box after a relative displacement ``d``.

    Square box of side L: ``L (L - d)``. Circular box of diameter D: the lens where two equal
    circles overlap, ``(D^2/2) [acos(d/D) - (d/D) sqrt(1 - (d/D)^2)]``.
    """
    d = np.abs(np.asarray(d_mm, dtype=float))
    if np.any(d >= width_mm):
        raise ValueError(f"displacement reaches the box width ({width_mm} mm): no contact area left")
    if shape == "square":
        return np.asarray(width_mm * (width_mm - d), dtype=float)
    r = d / width_mm
    return np.asarray(width_mm**2 / 2.0 * (np.arccos(r) - r * np.sqrt(1.0 - r**2)), dtype=float)


def height_of_solids_mm(specimen: Specimen) -> float:
    """Equivalent height of solids H_s = M_s / (G_s rho_w A), rho_w = 1 g/cm3 (mm)."""
    return specimen.dry_mass_g * 1000.0 / (specimen.gs * specimen.area0_mm2)


def void_ratio(height_mm: np.ndarray | float, hs_mm: float) -> np.ndarray:
    """Void ratio e = (H - H_s) / H_s from the current specimen height."""
    return (np.asarray(height_mm, dtype=float) - hs_mm) / hs_mm


def seating_shift_mm(x_mm: np.ndarray, force_n: np.ndarray, fraction: float) -> tuple[float, int]:
    """Horizontal displacement taken up as seating slack, and the index where shear starts.

    Shear starts at the first reading whose force reaches ``fraction`` of the maximum force. The
    shift is where the straight line through the readings between that point and 5 x ``fraction``
    of the maximum crosses zero force, kept between the first reading and the start of shear.
    """
    fmax = float(np.max(force_n))
    if fmax <= 0:
        raise ValueError("shear force never rises above zero")
    start = int(np.argmax(force_n >= fraction * fmax))
    upper = int(np.argmax(force_n >= 5 * fraction * fmax))
    x0 = float(x_mm[0])
    xs, fs = x_mm[start : upper + 1], force_n[start : upper + 1]
    dx = xs - xs.mean()
    sxx = float(dx @ dx)
    if upper - start >= 2 and sxx > 0:  # least squares in closed form: a stuck displacement gives no line, no warning
        slope = float(dx @ (fs - fs.mean())) / sxx
        intercept = float(fs.mean()) - slope * float(xs.mean())
        shift = -intercept / slope if slope > 0 else float(x_mm[start])
    else:
        shift = float(x_mm[start])
    return float(np.clip(shift, x0, float(x_mm[start]))), start


def dilation_rate(x_mm: np.ndarray, y_mm: np.ndarray, window_mm: float) -> np.ndarray:
    """Rate of dilation dy/dx at each reading (dimensionless, positive while dilating).

    The curve y(x) is resampled on a uniform step of window/25 (readings taken in order of x),
    differentiated with a quadratic Savitzky-Golay filter over ``window_mm`` and interpolated back
    to the readings. The readings themselves are not altered.
    """
    return smooth_on_x(x_mm, y_mm, window_mm, deriv=1)


def smooth_on_x(x_mm: np.ndarray, v: np.ndarray, window_mm: float, deriv: int = 0) -> np.ndarray:
    """Savitzky-Golay smoothing (``deriv=0``) or slope (``deriv=1``) of ``v`` against ``x``.

    ``v`` is resampled on a uniform step of window/25 in order of x, filtered with a quadratic
    over 51 points (the window) and interpolated back to the readings' x.
    """
    if bool(np.all(x_mm[1:] >= x_mm[:-1])):  # already in order of x (the usual case): no copies
        xs, vs = x_mm, v
    else:
        order = np.argsort(x_mm, kind="stable")
        xs, vs = x_mm[order], v[order]
    span = float(xs[-1] - xs[0])
    step = window_mm / 25.0
    if span < 2 * window_mm:
        raise ValueError(f"horizontal travel {span:.3f} mm is shorter than twice the smoothing window")
    grid = np.arange(xs[0], xs[-1] + step / 2, step)
    vg = np.interp(grid, xs, vs)
    out = savgol_filter(vg, window_length=51, polyorder=2, deriv=deriv, delta=step, mode="interp")
    return np.asarray(np.interp(x_mm, grid, out), dtype=float)


@dataclass(frozen=True)
class ReducedStage:
    """A reduced stage: one row per reading plus the scalars of the reduction.

    ``curve`` columns: ``time_s``, ``x_raw_mm`` (as read), ``x_mm`` (after the seating shift),
    ``y_mm`` (dilation positive, zero at the first reading), ``area_mm2`` (the area forces were
    divided by), ``tau_kpa``, ``tau_smooth_kpa`` (lightly smoothed, to locate picks), ``sigma_kpa``,
    ``ratio`` (tau/sigma), ``e``, ``dydx``, ``in_shear`` (False for seating readings, which are kept
    but not used for picks) and ``pass_no`` (1 for the first forward pass; reversal tests count
    their passes) and ``spike`` (isolated spike, Hampel filter: kept and shown, left out of the
    smoothing and of suggestions).
    Derived on demand, so a long curve does not carry them: stresses on the other area convention
    (:func:`stresses_kpa`), height (:func:`height_mm`), dry density (:func:`dry_density_mg_m3`),
    Taylor's interlocking-free ratio (:func:`kernels_helpers.dilatancy.interlocking_free_ratio`).
    """

    stage_id: str
    curve: pd.DataFrame
    seating_shift_mm: float
    hs_mm: float
    e_initial: float  # before consolidation
    e_start: float  # at the start of shear (after consolidation)
    normal_force_n: float
    area0_mm2: float
    area_convention: AreaConvention
    settlement_mm: float = 0.0  # consolidation settlement the heights use (positive = compression)
    settlement_source: str = "declared"  # "declared" (project file), "consolidation readings", or "none"
    height_initial_mm: float = 0.0  # H_0, before consolidation
    sparse: bool = False  # readings too far apart to smooth (a hand-logged sheet): kept as read (is_sparse)

    @property
    def height_start_mm(self) -> float:
        """H_0 - consolidation settlement: the height at the start of shearing (mm)."""
        return self.height_initial_mm - self.settlement_mm

    @cached_property
    def pick_rows(self) -> pd.DataFrame:
        """Readings a pick may use: shearing (after the seating slack), first pass, not flagged as spikes.

        Selected once per reduced stage (picks evaluate it many times, the live refit on every drag).
        """
        c = self.curve
        keep = c["in_shear"].to_numpy() & (c["pass_no"].to_numpy() == 1)
        if "spike" in c:
            keep &= ~c["spike"].to_numpy(dtype=bool)
        rows: pd.DataFrame = c.loc[keep]
        return rows


def height_mm(reduced: ReducedStage, specimen: Specimen) -> np.ndarray:
    """Specimen height at every reading: H_0 - consolidation settlement + vertical displacement (mm)."""
    del specimen  # the reduction holds the height at the start of shearing it used
    return reduced.height_start_mm + reduced.curve["y_mm"].to_numpy()


def dry_density_mg_m3(reduced: ReducedStage, specimen: Specimen) -> np.ndarray:
    """Dry density rho_d = G_s rho_w / (1 + e) at every reading, rho_w = 1 Mg/m3."""
    return specimen.gs / (1.0 + reduced.curve["e"].to_numpy())


def stresses_kpa(reduced: ReducedStage, specimen: Specimen,
                 convention: AreaConvention) -> tuple[np.ndarray, np.ndarray]:
    """Shear and normal stress (kPa) at every reading on the ``"nominal"`` or ``"corrected"`` area.

    Either convention is available whichever one the curve was reduced with: the force is
    ``tau_kpa x area_mm2``. Computed on demand, so a long curve does not carry four more columns.
    """
    c = reduced.curve
    force = c["tau_kpa"].to_numpy() * c["area_mm2"].to_numpy()  # N x 1000
    if convention == "nominal":
        area: np.ndarray | float = reduced.area0_mm2
    else:
        area = corrected_area_mm2(specimen.shape, specimen.width_mm, np.clip(c["x_mm"].to_numpy(), 0.0, None))
    return force / area, reduced.normal_force_n * 1000.0 / area * np.ones(len(c))


def reduce_stage(stage: StageSpec, readings: StageReadings, settings: ReductionSettings,
                 origin_mm: float | None = None,
                 settlement: tuple[float, str] | None = None) -> ReducedStage:
    """Reduce one stage's readings to stresses, void ratio and rate of dilation.

    ``settlement``: the consolidation settlement (mm) and its source, as :func:`settlement_of`
    gives it from the project file and the consolidation readings; None: the declared value, else 0.

    ``origin_mm``: for a later stage of a multi-stage test that continues from the previous
    displacement, the zero of x found on the first stage (no new seating slack is sought).

    The steps: displacements zeroed and stresses on the contact area (:func:`_shearing`), heights and
    void ratio from the settlement (:func:`_heights`), spikes, smoothing and rate of dilation
    (:func:`_smoothed`; a hand-logged sheet is kept as read), the curve table (:func:`_reduced`).
    """
    shear = _shearing(stage, readings, settings, origin_mm)
    heights = _heights(stage.specimen, shear.y, settlement)
    sparse = is_sparse(shear.x[shear.start:], settings)
    smoothed = _kept_as_read(shear) if sparse else _smoothed(stage, shear, settings)
    return _reduced(stage, readings, shear, heights, smoothed, settings.area_convention, sparse)


@dataclass(frozen=True)
class _Shearing:
    """The readings with x zeroed (seating slack removed) and the stresses on the contact area."""

    x: np.ndarray  # mm, zeroed
    y: np.ndarray  # mm, from the first reading, dilation positive
    force: np.ndarray  # shear force, N
    area: np.ndarray  # contact area, mm2
    tau: np.ndarray  # kPa
    sigma: np.ndarray  # kPa
    normal: float  # normal force, N
    shift: float  # the seating slack taken out of x, mm
    start: int  # the first reading of shearing
    pass_no: np.ndarray  # the pass of each reading (1 for every test but reversals)


def _shearing(stage: StageSpec, readings: StageReadings, settings: ReductionSettings,
              origin_mm: float | None) -> _Shearing:
    """x zeroed at the end of the seating slack (or at the first stage's zero), checked against the box, and
    the shear and normal stress on the corrected or nominal area."""
    t, spec = readings.table, stage.specimen
    x_raw = t["x_mm"].to_numpy()
    # a laboratory may give shear stress on the nominal area instead of force: back to a force
    force = t["shear_force_n"].to_numpy() if "shear_force_n" in t else (
        t["shear_stress_nominal_kpa"].to_numpy() * spec.area0_mm2 / 1000.0)
    try:
        shift, start = ((origin_mm, 0) if origin_mm is not None
                        else seating_shift_mm(x_raw, force, settings.seating_fraction))
    except ValueError as exc:
        raise ReadingsError(f"{stage.file}: {exc}; check the shear force column and its unit.") from exc
    x = x_raw - shift
    beyond = np.flatnonzero(~(np.abs(x) < spec.width_mm))  # also NaN: a reading that reads as no number
    if beyond.size:
        i = int(beyond[0])
        raise ReadingsError(
            f"{stage.file}, line {readings.line(i)}: horizontal displacement {x_raw[i]:.4g} mm reaches the box "
            f"width {spec.width_mm:g} mm ({beyond.size} reading(s)): no contact area would be left. Check the unit "
            "of the displacement column and the box size (side_mm or diameter_mm) in the project file.")
    if settings.area_convention == "corrected":
        area = corrected_area_mm2(spec.shape, spec.width_mm, np.clip(x, 0.0, None))
    else:
        area = np.full_like(x, spec.area0_mm2)
    normal = stage.normal_load.force_n
    pass_no = label_passes(x) if stage.test_type == "reversal" else np.ones(len(x), dtype=np.int64)
    return _Shearing(x=x, y=t["y_mm"].to_numpy() - float(t["y_mm"].iloc[0]), force=force, area=area,
                     tau=force / area * 1000.0, sigma=normal / area * 1000.0,  # N/mm2 -> kPa
                     normal=normal, shift=shift, start=start, pass_no=pass_no)


@dataclass(frozen=True)
class _Heights:
    """The consolidation settlement used (mm, and its source), the height at the start of shearing, void ratio."""

    settled_mm: float
    source: str
    h_start: float
    e: np.ndarray


def _heights(spec: Specimen, y: np.ndarray, settlement: tuple[float, str] | None) -> _Heights:
    settled_mm, source = settlement or settlement_of(spec.consolidation_settlement_mm, None)
    h_start = spec.height_mm - settled_mm
    return _Heights(settled_mm, source, h_start,
                    void_ratio(h_start + y, height_of_solids_mm(spec)))  # H = H_0 - consolidation settlement + y


@dataclass(frozen=True)
class _Smoothed:
    """The rate of dilation, the smoothed shear stress and the isolated spikes (kept as read) of each reading."""

    dydx: np.ndarray
    tau_smooth: np.ndarray
    spike: np.ndarray


def _kept_as_read(shear: _Shearing) -> _Smoothed:
    """A hand-logged sheet: every reading kept as it is, dy/dx between neighbouring readings."""
    return _Smoothed(_sparse_rate(shear.x, shear.y, shear.start), shear.tau.copy(), np.zeros(len(shear.x), dtype=bool))


def _smoothed(stage: StageSpec, shear: _Shearing, settings: ReductionSettings) -> _Smoothed:
    """Isolated spikes found (Hampel filter, checks.py) and kept as read, the smoothing seeing the moving median
    instead; then each pass smoothed on its own (x runs both ways in a reversal test)."""
    x, y, tau, start = shear.x, shear.y, shear.tau, shear.start
    dydx = np.full_like(x, np.nan)
    tau_smooth = np.full_like(x, np.nan)
    spike = np.zeros(len(x), dtype=bool)
    tau_clean, y_clean = tau, y  # replaced by copies only where a spike is found
    spike_tau, tau_rest = hampel_spikes(tau[start:])  # the readings from the start of shear on
    if spike_tau.any():
        tau_clean = tau.copy()
        tau_clean[start:] = tau_rest
    del tau_rest
    spike_y, y_rest = hampel_spikes(y[start:])
    if spike_y.any():
        y_clean = y.copy()
        y_clean[start:] = y_rest
    del y_rest
    spike[start:] = spike_tau | spike_y
    in_shear = np.arange(len(x)) >= start
    for p in np.unique(shear.pass_no):
        # one pass from the start of shear to the end (every test but reversals): a slice, no copies
        sel: slice | np.ndarray = (slice(start, None) if stage.test_type != "reversal"
                                   else in_shear & (shear.pass_no == p))
        if p > 1 and isinstance(sel, np.ndarray) and (not sel.any()
                                                     or np.ptp(x[sel]) < 2 * settings.smoothing_window_mm):
            continue  # a short return pass: no rate of dilation, readings kept
        try:
            dydx[sel] = dilation_rate(x[sel], y_clean[sel], settings.smoothing_window_mm)
            tau_smooth[sel] = smooth_on_x(x[sel], tau_clean[sel], settings.peak_smoothing_mm)
        except ValueError as exc:
            raise ReadingsError(
                f"{stage.file}: {exc}; reduce the smoothing window or check the displacement column."
            ) from exc
    return _Smoothed(dydx, tau_smooth, spike)


def is_sparse(x_mm: np.ndarray, settings: ReductionSettings) -> bool:
    """Readings too far apart to smooth: fewer than four in the peak-smoothing window (a hand-logged sheet).

    Such a curve is kept as read: no spike filter (every reading was taken on purpose), the peak at
    the highest reading, and the rate of dilation by central differences between neighbouring readings.
    """
    steps = np.abs(np.diff(x_mm))
    steps = steps[steps > 0]
    return bool(steps.size) and float(np.median(steps)) > settings.peak_smoothing_mm / 4.0


def _sparse_rate(x: np.ndarray, y: np.ndarray, start: int) -> np.ndarray:
    """dy/dx between neighbouring readings (central differences; one-sided at the ends), from the start of shear."""
    out = np.full_like(x, np.nan)
    xs, ys = x[start:], y[start:]
    if xs.size >= 3:
        with np.errstate(divide="ignore", invalid="ignore"):
            rate = np.gradient(ys, xs)
        out[start:] = np.where(np.isfinite(rate), rate, np.nan)
    return out


def _reduced(stage: StageSpec, readings: StageReadings, shear: _Shearing, heights: _Heights, smoothed: _Smoothed,
             area_convention: AreaConvention, sparse: bool) -> ReducedStage:
    """The reduced curve (one row per reading) and the stage's constants."""
    t, spec = readings.table, stage.specimen
    hs = height_of_solids_mm(spec)
    curve = pd.DataFrame(
        {
            "time_s": t["time_s"].to_numpy() if "time_s" in t else np.full(len(t), np.nan),  # none: a hand sheet
            "x_raw_mm": t["x_mm"].to_numpy(),
            "x_mm": shear.x,
            "y_mm": shear.y,
            "area_mm2": shear.area,
            "tau_kpa": shear.tau,
            "tau_smooth_kpa": smoothed.tau_smooth,
            "sigma_kpa": shear.sigma,
            "ratio": shear.force / shear.normal,  # tau/sigma: the area cancels
            "e": heights.e,
            "dydx": smoothed.dydx,
            "in_shear": np.arange(len(shear.x)) >= shear.start,
            "pass_no": shear.pass_no,
            "spike": smoothed.spike,
        },
        copy=False,
    )
    return ReducedStage(
        stage_id=stage.id,
        curve=curve,
        seating_shift_mm=shear.shift,
        hs_mm=hs,
        e_initial=float(void_ratio(spec.height_mm, hs)),
        e_start=float(void_ratio(heights.h_start, hs)),
        normal_force_n=shear.normal,
        area0_mm2=spec.area0_mm2,
        area_convention=area_convention,
        settlement_mm=heights.settled_mm,
        settlement_source=heights.source,
        height_initial_mm=spec.height_mm,
        sparse=sparse,
    )


def settlement_of(declared_mm: float | None, readings_final_mm: float | None) -> tuple[float, str]:
    """The consolidation settlement the reduction uses, and where it comes from.

    The value declared in the project file when there is one (a mismatch with the readings is
    flagged by the consolidation analysis); else the last reading of the consolidation stage (the
    end of consolidation, ASTM D3080 and ISO 17892-10 shear the specimen from there); else none.
    """
    if declared_mm is not None:
        return declared_mm, "declared"
    if readings_final_mm is not None:
        return readings_final_mm, "consolidation readings"
    return 0.0, "none"
