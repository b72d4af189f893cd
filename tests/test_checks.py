"""Reduction columns (both area conventions, dry density, Taylor's ratio, spikes) and the specimen checks."""

from __future__ import annotations

import dataclasses
import re
import shutil
from pathlib import Path

import numpy as np
import pytest

from kernels_helpers import Interpretation, interpret, load_project
from kernels_helpers.checks import hampel_spikes, normal_load_flags, phase_flags, size_flags
from kernels_helpers.dilatancy import interlocking_free_ratio
from kernels_helpers.errors import ReadingsError
from kernels_helpers.readings import read_stage
from kernels_helpers.reduce import (
    ReductionSettings,
    corrected_area_mm2,
    dry_density_mg_m3,
    height_mm,
    reduce_stage,
    stresses_kpa,
)

EXAMPLE = Path(__file__).resolve().parent.parent / "example_project"


@pytest.fixture(scope="module")
def d1():
    stage = load_project(EXAMPLE).stage("BH03-D1")
    return stage, read_stage(stage), reduce_stage(stage, read_stage(stage), ReductionSettings())


def test_both_conventions_and_derived_columns(d1) -> None:
    stage, _, reduced = d1
    c = reduced.curve
    a0 = 3600.0  # square 60 mm box
    ac = corrected_area_mm2("square", 60.0, np.clip(c["x_mm"], 0, None))
    tau_n, sigma_n = stresses_kpa(reduced, stage.specimen, "nominal")
    tau_c, sigma_c = stresses_kpa(reduced, stage.specimen, "corrected")
    # same force on two areas: tau_nominal A0 = tau_corrected A_c (REFERENCES sec. 3, A_c = L (L - d))
    np.testing.assert_allclose(tau_n * a0, tau_c * ac, rtol=1e-12)
    np.testing.assert_allclose(sigma_n, 180.0 / a0 * 1000.0)  # 180 N on 3600 mm2 = 50 kPa
    np.testing.assert_allclose(c["tau_kpa"], tau_c)  # default convention: corrected
    np.testing.assert_allclose(c["sigma_kpa"], sigma_c)
    # tau/sigma does not depend on the convention (ASTM D3080 sec. 5.6)
    np.testing.assert_allclose(tau_n / sigma_n, c["ratio"], rtol=1e-12)
    nominal = reduce_stage(stage, read_stage(stage), ReductionSettings(area_convention="nominal"))
    np.testing.assert_allclose(stresses_kpa(nominal, stage.specimen, "corrected")[0], tau_c, rtol=1e-12)
    np.testing.assert_allclose(nominal.curve["tau_kpa"], tau_n, rtol=1e-12)
    # rho_d = G_s rho_w / (1 + e) (REFERENCES sec. 4)
    np.testing.assert_allclose(dry_density_mg_m3(reduced, stage.specimen), 2.65 / (1.0 + c["e"]), rtol=1e-12)
    # H = H_0 - consolidation settlement + y (REFERENCES sec. 4, textbook relation)
    np.testing.assert_allclose(height_mm(reduced, stage.specimen),
                               stage.specimen.height_mm - stage.specimen.consolidation_settlement_mm + c["y_mm"])
    # Taylor's interlocking-free ratio tau/sigma - dy/dx (REFERENCES sec. 5, from memory)
    np.testing.assert_allclose(interlocking_free_ratio(c), c["ratio"] - c["dydx"], equal_nan=True)
    assert not c["spike"].any()  # the invented readings carry Gaussian noise only


def test_dry_density_of_the_published_check() -> None:
    # REFERENCES sec. 4 [C]: H 19.000 mm, G_s 2.68, M_s 95.2 g, A 3167.7 mm2 -> H_s 11.214 mm, e_0 0.6943
    e0 = 0.6943
    assert 2.68 / (1 + e0) == pytest.approx(1.5818, abs=1e-4)  # rho_d in Mg/m3 [C]


def test_hampel_finds_injected_spikes_only() -> None:
    rng = np.random.default_rng(7)
    x = np.linspace(0, 10, 2000)
    v = 50 * np.tanh(x) + 0.2 * rng.standard_normal(x.size)
    clean, _ = hampel_spikes(v)
    assert not clean.any()  # no false spike in Gaussian noise (6 robust s.d.)
    spiked = v.copy()
    at = [300, 1200, 1701]
    spiked[at] += [8.0, -6.0, 10.0]
    found, repaired = hampel_spikes(spiked)
    assert np.flatnonzero(found).tolist() == at
    np.testing.assert_allclose(repaired[at], v[at], atol=1.0)  # replaced by the moving median
    step = v.copy()
    step[1000:] += 5.0  # a step is a change of the curve, not an isolated spike
    assert not hampel_spikes(step)[0].any()


def test_spike_kept_flagged_and_left_out_of_smoothing(example_copy: Path) -> None:
    path = example_copy / "readings" / "BH03-D1.csv"
    lines = path.read_text(encoding="utf-8").split("\n")
    row = 1504  # a data row at about 5 mm
    fields = lines[row].split(",")
    fields[3] = f"{float(fields[3]) * 1.5:.5f}"  # shear load 50 % high on one reading
    lines[row] = ",".join(fields)
    path.write_text("\n".join(lines), encoding="utf-8")
    s = interpret(example_copy, Interpretation()).stage("BH03-D1")
    c = s.reduced.curve
    i = row - 4  # 4 lines above the first data row (3 preamble + header)
    assert c["spike"].to_numpy().nonzero()[0].tolist() == [i]
    assert c["tau_kpa"].iloc[i] > 1.4 * c["tau_smooth_kpa"].iloc[i]  # the raw reading is kept as read
    assert abs(c["tau_smooth_kpa"].iloc[i] - c["tau_smooth_kpa"].iloc[i - 30]) < 2.0  # the smoothing ignores it
    assert any(f.startswith(f"1 isolated spike(s) in shear stress or vertical displacement (Hampel filter) at line(s) "
                            f"{row + 1}:") for f in s.flags), s.flags


def _spec(**changes):
    stage = load_project(EXAMPLE).stage("BH03-D1")
    return dataclasses.replace(stage, specimen=dataclasses.replace(stage.specimen, **changes))


@pytest.mark.parametrize(
    ("changes", "expected"),
    [
        ({}, []),
        ({"width_mm": 40.0}, ["specimen side 40 mm is below 50 mm", "side to height ratio 2.00 is below 2"][:1]),
        ({"height_mm": 10.0}, ["specimen height 10 mm is below 12.5 mm"]),  # REFERENCES sec. 1, from memory
        ({"height_mm": 35.0}, ["side to height ratio 1.71 is below 2"]),  # from memory
        ({"max_particle_mm": 5.0}, ["height 20 mm is less than 6 x the largest particle (5 mm): needs 30 mm",
                                     "side 60 mm is less than 10 x the largest particle (5 mm): needs 50 mm"][:1]),
        ({"max_particle_mm": 7.0}, ["height 20 mm is less than 6 x the largest particle (7 mm): needs 42 mm",
                                     "side 60 mm is less than 10 x the largest particle (7 mm): needs 70 mm"]),
    ],
)
def test_size_flags(changes: dict, expected: list[str]) -> None:
    assert size_flags(_spec(**changes)) == expected  # width >= 10 d_max [P], the rest from memory


def test_phase_flags() -> None:
    assert phase_flags(_spec(), 0.58, 0.57, 0.55) == []
    assert phase_flags(_spec(), -0.1, -0.12, -0.2)[0].startswith("void ratio is not positive (e0 -0.100")
    assert phase_flags(_spec(), 5.0, 4.9, 4.8)[0].startswith("initial void ratio 5.000 is outside 0.2-4")
    # S_r = w G_s / e (REFERENCES sec. 4): 25 % x 2.65 / 0.58 = 114 %
    flags = phase_flags(_spec(water_content_pct=25.0), 0.58, 0.57, 0.55)
    assert flags == ["degree of saturation S_r = w G_s / e0 = 25 % x 2.65 / 0.580 = 114 % exceeds 100 %; check "
                     "dry_mass_g, gs, height_mm and the consolidation settlement and water_content_pct"]
    assert phase_flags(_spec(water_content_pct=20.0), 0.58, 0.57, 0.55) == []  # 91 %


def test_normal_load_flags() -> None:
    spec = _spec()  # 180 N declared
    force = np.full(100, 180.0)
    in_shear = np.arange(100) >= 10
    assert normal_load_flags(spec, force, in_shear, lambda i: i + 5) == []
    force[50] = 190.0  # 5.6 % high
    [flag] = normal_load_flags(spec, force, in_shear, lambda i: i + 5)
    assert flag.startswith("normal load not constant: 190.0 N at line 55 against 180.0 N declared (5.6 % off; "
                           "1 reading(s) beyond 3 %)")
    assert normal_load_flags(spec, None, in_shear, lambda i: i) == []


def _with_times(folder: Path, swap: tuple[int, int]) -> Path:
    path = folder / "readings" / "BH03-D1.csv"
    lines = path.read_text(encoding="utf-8").split("\n")
    a, b = swap
    fa, fb = lines[a].split(","), lines[b].split(",")
    fa[0], fb[0] = fb[0], fa[0]
    lines[a], lines[b] = ",".join(fa), ",".join(fb)
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


def test_time_order_error_or_flag(example_copy: Path, tmp_path: Path) -> None:
    path = _with_times(example_copy, (100, 101))
    # lines 101 and 102 swapped: line 102 (192 s, minutes to 4 decimals) comes after 193.998 s
    expected = (f"{path.resolve()}, line 102, column 'Elapsed time (min)': time goes back from the previous reading "
                "(193.998 s then 192 s; 1 reading(s) out of order). Ask the laboratory for a corrected file, or set "
                "csv.time_order = \"flag\"")
    with pytest.raises(ReadingsError, match=re.escape(expected)):
        read_stage(load_project(example_copy).stage("BH03-D1"))
    flagged = tmp_path / "flagged"
    shutil.copytree(example_copy, flagged)  # the same swapped readings, read with time_order = "flag"
    toml = flagged / "project.toml"
    toml.write_text(toml.read_text().replace("header_row = 3\n", "header_row = 3\ntime_order = \"flag\"\n", 1))
    s = interpret(flagged, Interpretation()).stage("BH03-D1")
    assert any(f.startswith("timestamps do not increase: line 102, column 'Elapsed time (min)'") for f in s.flags)
