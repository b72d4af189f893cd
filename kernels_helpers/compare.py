"""Do several test sets belong to one envelope? Each set's fit beside the pooled one, and an F-test.

Method: the extra-sum-of-squares F-test of coincident regression lines (as in Chow's test). One
line through all points (pooled) is compared with a separate line per set:
F = ((SSE_pooled - SSE_sets) / (p (k - 1))) / (SSE_sets / (N - p k)), p = 2 parameters per line
with c' free (same c' and phi') or 1 through the origin (same phi'), k sets, N points. A small
p-value (below 0.05) says the sets differ more than their own scatter explains. With three points a
set, the test has very few degrees of freedom and little power: the per-set intervals and an
engineer's look at the points matter as much.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from scipy import stats

from .envelope import LineFit, fit_line, fit_through_origin

__all__ = ["SetComparison", "compare_sets", "overlaps_pooled"]

METHOD = ("extra-sum-of-squares F-test of coincident lines (Chow-type): pooled line against one line per set, "
          "F = ((SSE_pooled - SSE_sets)/(p(k - 1))) / (SSE_sets/(N - pk)); p = 2 with c' free, 1 through the origin")


@dataclass(frozen=True)
class SetComparison:
    """Per-set fits, the pooled fit of the same points, and the F-test of one line for all."""

    through_origin: bool
    sets: tuple[str, ...]  # the sets compared (each with enough points for its own fit and interval)
    fits: tuple[LineFit, ...]
    left_out: tuple[str, ...]  # sets with too few points, in words
    pooled: LineFit | None
    f_value: float | None
    dof: tuple[int, int] | None
    p_value: float | None
    statement: str
    method: str = METHOD
    group: str = ""  # the pooled envelope group, when the pipeline made the comparison
    kind: str = ""


def _sse(fit: LineFit) -> float:
    return float(sum(r * r for r in fit.residuals))


def compare_sets(sets: Mapping[str, tuple[Sequence[float], Sequence[float]]], through_origin: bool = False,
                 level: float = 0.95) -> SetComparison:
    """Compare the envelopes of ``sets`` (name -> (sigma, tau) in kPa) with their pooled envelope."""
    p = 1 if through_origin else 2
    names, fits, left_out = [], [], []
    for name, (sigma, tau) in sets.items():
        if len(sigma) >= p + 1 and len(set(sigma)) >= p:
            names.append(name)
            fits.append(fit_through_origin(sigma, tau, level) if through_origin else fit_line(sigma, tau, level))
        else:
            left_out.append(f"{name}: {len(sigma)} point(s), a fit with its own interval needs {p + 1}")
    if len(names) < 2:
        return SetComparison(through_origin, tuple(names), tuple(fits), tuple(left_out), None, None, None, None,
                             "fewer than two sets with enough points: nothing to compare")
    xs = [v for n in names for v in sets[n][0]]
    ys = [v for n in names for v in sets[n][1]]
    pooled = fit_through_origin(xs, ys, level) if through_origin else fit_line(xs, ys, level)
    k, n_all = len(names), len(xs)
    sse_sets, sse_pooled = sum(_sse(f) for f in fits), _sse(pooled)
    df1, df2 = p * (k - 1), n_all - p * k
    if sse_sets <= 0:
        f_value = p_value = None
        statement = "every set lies exactly on its own line: the F-test cannot be formed"
    else:
        f_value = ((sse_pooled - sse_sets) / df1) / (sse_sets / df2)
        p_value = float(stats.f.sf(f_value, df1, df2))
        what = "c' and phi'" if not through_origin else "phi'"
        if p_value < 0.05:
            statement = (f"F = {f_value:.2f} on ({df1}, {df2}) dof, p = {p_value:.3g} < 0.05: the sets differ in "
                         f"{what} more than their scatter explains; a pooled envelope mixes different behaviour")
        else:
            statement = (f"F = {f_value:.2f} on ({df1}, {df2}) dof, p = {p_value:.3g} >= 0.05: no evidence that the "
                         f"sets differ in {what}; with few points the test is weak, so also compare the intervals")
    return SetComparison(through_origin, tuple(names), tuple(fits), tuple(left_out), pooled, f_value, (df1, df2),
                         p_value, statement)


def overlaps_pooled(fit: LineFit, pooled: LineFit) -> bool:
    """True when a set's phi' interval overlaps the pooled one (a visual aid, not a test)."""
    lo, hi = fit.phi_interval_deg
    plo, phi = pooled.phi_interval_deg
    return lo <= phi and plo <= hi
