"""Checks on a stage an engineer should see: isolated spikes, specimen size and phase, normal load.

Pure functions; each check returns flags (words with the numbers) rather than raising, so a
doubtful stage is still shown. Rules and tolerances (also in the contributor guide):

* Spikes (Hampel filter): a reading is an isolated spike when it departs from the median of the
  ``2 * HAMPEL_HALF_WINDOW + 1`` readings around it by more than ``HAMPEL_THRESHOLD`` robust
  standard deviations (1.4826 x the median absolute departure over the whole series: a local
  MAD over 15 readings is itself so noisy that it flagged ~1 % of clean readings) and by more
  than ``HAMPEL_FLOOR`` of the series' range. Applied to shear stress and vertical displacement
  during shear. Spikes are kept and drawn; smoothing and suggestions do not use them.
* Specimen size (REFERENCES sec. 1, from memory except width >= 10 d_max): width or diameter
  >= 50 mm, initial height >= 12.5 mm, width/height >= 2; with d_max given, height >= 6 d_max
  and width >= 10 d_max.
* Phase (common practice): e > 0 throughout; e0 between 0.2 and 4 for a soil; with the water
  content given, S_r = w G_s / e0 <= 100 % (+ 2 points for measurement error).
* Normal load (common practice): when the file has a normal force or stress column, each reading
  during shear within ``NORMAL_TOLERANCE`` of the load declared in the project file.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Final

import numpy as np
from scipy.ndimage import median_filter

from .project import StageSpec
from .settings import PickSettings

LineOf = Callable[[int], int]  # a row of the readings -> its line in the file

__all__ = ["hampel_spikes", "normal_load_flags", "phase_flags", "size_flags", "spike_flags"]

HAMPEL_HALF_WINDOW: Final = 7
HAMPEL_THRESHOLD: Final = 6.0
HAMPEL_FLOOR: Final = 0.005  # fraction of the series' range
MAD_SCALE: Final = 1.4826  # 1 / Phi^-1(3/4): MAD -> standard deviation for normal noise
NORMAL_TOLERANCE: Final = 0.03
SR_TOLERANCE: Final = 0.02
E0_RANGE: Final = (0.2, 4.0)


def hampel_spikes(values: np.ndarray, half_window: int = HAMPEL_HALF_WINDOW, threshold: float = HAMPEL_THRESHOLD,
                  floor: float = HAMPEL_FLOOR) -> tuple[np.ndarray, np.ndarray]:
    """Isolated spikes of a series in reading order, and the series with each spike replaced by its median.

    Parameters
    ----------
    values
        Readings in the order they were taken (any unit).
    half_window
        Readings on each side of the one tested.
    threshold
        Departure from the moving median, in robust standard deviations of the whole series.
    floor
        Smallest departure flagged, as a fraction of the range of ``values`` (so a noise-free or
        quantised series, whose MAD is zero, is not flagged everywhere).
    """
    v = np.asarray(values, dtype=float)
    if v.size < 2 * half_window + 1:
        return np.zeros(v.size, dtype=bool), v.copy()
    size = 2 * half_window + 1
    med = median_filter(v, size=size, mode="nearest")
    dev = np.subtract(v, med)
    np.abs(dev, out=dev)
    sample = dev[:: max(1, dev.size // 100_000)]  # the scale from at most ~100,000 readings, evenly spread
    limit = max(threshold * MAD_SCALE * float(np.median(sample)), floor * float(np.ptp(v)))
    spike = dev > limit
    del dev
    keep = ~spike
    med[keep] = v[keep]  # the series with each spike replaced by its moving median (in place)
    return spike, med


def spike_flags(spike: np.ndarray, line_of: LineOf, quantity: str) -> list[str]:
    """A flag naming the lines of the spikes found in one series (none when there are none)."""
    rows = np.flatnonzero(spike)
    if not rows.size:
        return []
    lines = ", ".join(str(line_of(int(i))) for i in rows[:8]) + (" ..." if rows.size > 8 else "")
    return [f"{rows.size} isolated spike(s) in {quantity} (Hampel filter) at line(s) {lines}: kept and shown, "
            "left out of the smoothing and the suggestions; look at the file if there are many"]


def size_flags(spec: StageSpec) -> list[str]:
    """Specimen size ratios (REFERENCES sec. 1)."""
    s = spec.specimen
    w, h, name = s.width_mm, s.height_mm, "side" if s.shape == "square" else "diameter"
    out = []
    if w < 50.0:
        out.append(f"specimen {name} {w:g} mm is below 50 mm")
    if h < 12.5:
        out.append(f"specimen height {h:g} mm is below 12.5 mm")
    if w / h < 2.0:
        out.append(f"{name} to height ratio {w / h:.2f} is below 2")
    if s.max_particle_mm is not None:
        d = s.max_particle_mm
        if h < 6 * d:
            out.append(f"height {h:g} mm is less than 6 x the largest particle ({d:g} mm): needs {6 * d:g} mm")
        if w < 10 * d:
            out.append(f"{name} {w:g} mm is less than 10 x the largest particle ({d:g} mm): needs {10 * d:g} mm")
    return out


def phase_flags(spec: StageSpec, e_initial: float, e_start: float, e_min: float) -> list[str]:
    """Plausibility of void ratio and degree of saturation (common practice)."""
    s = spec.specimen
    out = []
    fix = "check dry_mass_g, gs, height_mm and the consolidation settlement"
    if min(e_initial, e_start, e_min) <= 0:
        out.append(f"void ratio is not positive (e0 {e_initial:.3f}, at start of shear {e_start:.3f}, least "
                   f"{e_min:.3f}): impossible; {fix}")
    elif not E0_RANGE[0] <= e_initial <= E0_RANGE[1]:
        out.append(f"initial void ratio {e_initial:.3f} is outside {E0_RANGE[0]:g}-{E0_RANGE[1]:g}, unusual for a "
                   f"soil; {fix}")
    if s.water_content_pct is not None and e_initial > 0:
        sr = s.water_content_pct / 100.0 * s.gs / e_initial
        if sr > 1.0 + SR_TOLERANCE:
            out.append(f"degree of saturation S_r = w G_s / e0 = {s.water_content_pct:g} % x {s.gs:g} / "
                       f"{e_initial:.3f} = {sr * 100:.0f} % exceeds 100 %; {fix} and water_content_pct")
    return out


def normal_load_flags(spec: StageSpec, force_n: np.ndarray | None, in_shear: np.ndarray, line_of: LineOf,
                      tolerance: float = NORMAL_TOLERANCE) -> list[str]:
    """Normal force read during shear against the load declared in the project file."""
    if force_n is None:
        return []
    declared = spec.normal_load.force_n
    rows = np.flatnonzero(in_shear)
    if not rows.size:
        return []
    dev = np.abs(force_n[rows] - declared) / declared
    worst = int(np.argmax(dev))
    if dev[worst] <= tolerance:
        return []
    n_out = int(np.count_nonzero(dev > tolerance))
    return [f"normal load not constant: {force_n[rows[worst]]:.1f} N at line {line_of(int(rows[worst]))} against "
            f"{declared:.1f} N declared ({dev[worst] * 100:.1f} % off; {n_out} reading(s) beyond "
            f"{tolerance * 100:g} %); check the loading system and the normal_load of the project file"]


#: what each channel's fault makes unreliable (words for the results and the record)
DEPENDS_ON = {
    "vertical displacement": ("void ratio", "rate of dilation", "stress-dilatancy aids (Taylor, Bolton)",
                              "critical-state void ratio and line"),
    "horizontal displacement": ("every pick position", "corrected area and stresses", "rate of dilation",
                                "drained-rate check"),
    "shear force": ("shear stress", "every pick and envelope of the stage"),
}


def transducer_flags(channels: dict[str, np.ndarray], line_of: LineOf, travel_mm: float,
                     settings: PickSettings | None = None) -> tuple[list[str], list[str]]:
    """Flags for channels that are stuck, that jump by a step which stays, or (vertical) do not move,
    over the shearing readings; and what the faults make unreliable (common practice; thresholds in
    :class:`.settings.PickSettings`: ``stuck_max_values``, ``still_vertical_mm``, ``jump_robust_sd``,
    ``jump_range_fraction``).

    ``channels``: quantity name -> readings from the start of shear; ``line_of``: row -> file line.
    """
    p = settings or PickSettings()
    flags: list[str] = []
    unreliable: list[str] = []
    for name, v in channels.items():
        v = np.asarray(v, dtype=float)
        if v.size < 10:
            continue
        fault = None
        span = f"lines {line_of(0)}-{line_of(v.size - 1)}"
        if np.unique(v).size <= p.stuck_max_values:
            fault = f"the {name} channel is stuck: {np.unique(v).size} value(s) over {v.size} readings ({span})"
        elif name == "vertical displacement" and np.ptp(v) < p.still_vertical_mm and travel_mm > 1.0:
            fault = (f"the vertical gauge does not move: {np.ptp(v) * 1000:.1f} um over {travel_mm:.1f} mm of "
                     f"shearing ({span})")
        elif name == "horizontal displacement" and (run := _final_run(v)) >= max(20, v.size // 5):
            fault = (f"the horizontal displacement stops advancing: the last {run} readings (lines "
                     f"{line_of(v.size - run)}-{line_of(v.size - 1)}) all read {v[-1]:.4g} mm while the test goes on")
        if fault is None and name != "shear force":  # a force drop is what stick-slip looks like
            fault = _jump(name, v, line_of, p)
        if fault:
            flags.append(f"transducer fault: {fault}; unreliable: {', '.join(DEPENDS_ON[name])}")
            unreliable += [u for u in DEPENDS_ON[name] if u not in unreliable]
    return flags, unreliable


def _final_run(v: np.ndarray) -> int:
    """How many readings at the end repeat the last value exactly."""
    differs = np.flatnonzero(v != v[-1])
    return int(v.size - (differs[-1] + 1)) if differs.size else int(v.size)


def _jump(name: str, v: np.ndarray, line_of: LineOf, p: PickSettings) -> str | None:
    d = np.diff(v)
    scale = 1.4826 * float(np.median(np.abs(d - np.median(d)))) + 1e-12
    big = np.flatnonzero((np.abs(d - np.median(d)) > p.jump_robust_sd * scale)
                         & (np.abs(d) > p.jump_range_fraction * max(float(np.ptp(v)), 1e-12)))
    for i in big:
        before, after = v[max(0, i - 4): i + 1], v[i + 1: i + 6]
        if after.size and abs(float(np.mean(after) - np.mean(before))) > 0.8 * abs(float(d[i])):
            return (f"the {name} channel jumps by {d[i]:+.4g} mm between lines {line_of(int(i))} and "
                    f"{line_of(int(i) + 1)} and stays there (no spike, no stick-slip)")
    return None
