"""The browser's envelope preview fits the line as the kernel does (scipy as the reference).

While a pick is dragged, the page refits the envelope itself (``PREVIEW_JS``): least squares with c'
free, or through the origin. Its fit function is run here in Debian chromium on the same points as
``scipy.stats.linregress`` and the through-origin formula b = sum(x y) / sum(x^2) (common practice).
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from scipy import stats

from kernels_helpers.envelope import fit_line, fit_through_origin
from kernels_helpers.views.live_plots import PREVIEW_JS

pytestmark = pytest.mark.browser


def _fit_function() -> str:
    m = re.search(r"^function fit\(xs, ys, origin\) \{.*?^\}$", PREVIEW_JS, re.S | re.M)
    assert m, "PREVIEW_JS has no fit(xs, ys, origin) function"
    return m.group(0)


def test_the_preview_fit_is_the_kernel_fit(browser) -> None:
    page = browser.new_page()
    try:
        page.set_content("<html><body></body></html>")
        rng = np.random.default_rng(7)
        for n in (2, 3, 5, 9):
            sigma = np.sort(rng.uniform(20, 400, n))
            tau = 5 + 0.7 * sigma + rng.normal(0, 4, n)
            c, b = page.evaluate(f"([xs, ys]) => {{ {_fit_function()} return fit(xs, ys, false); }}",
                                 [sigma.tolist(), tau.tolist()])
            ref = stats.linregress(sigma, tau)
            assert b == pytest.approx(ref.slope, rel=1e-12) and c == pytest.approx(ref.intercept, rel=1e-9, abs=1e-9)
            if n >= 3:  # the kernel's own fit agrees too
                kernel = fit_line(sigma, tau)
                assert b == pytest.approx(kernel.slope, rel=1e-12) and c == pytest.approx(kernel.intercept, abs=1e-9)
            c0, b0 = page.evaluate(f"([xs, ys]) => {{ {_fit_function()} return fit(xs, ys, true); }}",
                                   [sigma.tolist(), tau.tolist()])
            assert c0 == 0 and b0 == pytest.approx(float(np.sum(sigma * tau) / np.sum(sigma**2)), rel=1e-12)
            if n >= 2:
                assert b0 == pytest.approx(fit_through_origin(sigma, tau).slope, rel=1e-12)
        assert page.evaluate(f"() => {{ {_fit_function()} return fit([100, 100], [50, 60], false); }}") is None
    finally:
        page.close()
