"""Tests of the setup planner (:mod:`wavecal.plan`: core, orders, lamps, text, plot; and the command line).

Outside check values come from reference-values.md §3 (grating worked examples G4-G7); each
row there says which numbers were verified on the cited page and which were computed from the
standard formulas, and the comments below repeat that status. The consistency tests put the
planner next to the frame simulator and the peak finder: a frame simulated at a setting must
show its lines where the planner said they would be.
"""
from __future__ import annotations

import argparse
import json

import numpy as np
import pandas as pd
import pytest

from wavecal.extract import extract_spectrum
from wavecal.frames import frame_from_array
from wavecal.peaks import find_peaks
from wavecal.cli.plan import add_plan_arguments, run_plan_command
from wavecal.model_setup import nominal_model
from wavecal.optics import scalar_blaze_efficiency, solve_grating_angle
from wavecal.plan import PlanningError, clean_range, plan_setup
from wavecal.plan.lamps import score_lamps
from wavecal.plan.plot import save_plan_plot
from wavecal.plan.text import format_plan
from wavecal.profile import load_profile, profile_from_dict
from wavecal.simulate import simulate_arc

PIXEL_MM = 0.015


def bench(grooves: float, order: int, focal: float, *, deviation: float = 0.0, blaze=None,
          collimator=None, sensitivity=None, n_pixels: int = 2048, mount: str = "reflection"):
    """An invented test-bench spectrograph of the (invented) Tamsin Hill Observatory."""
    data = {
        "instrument": {"name": "Tamsin Hill test bench"},
        "grating": {"mount": mount, "grooves_per_mm": grooves, "order": order,
                    "deviation_deg": deviation},
        "camera": {"focal_length_mm": focal},
        "detector": {"pixel_size_um": PIXEL_MM * 1e3, "shape": [100, n_pixels]},
        "header": {"grating_angle": {"keyword": "GRTANGLE"}},
    }
    if blaze is not None:
        data["grating"]["blaze_nm"] = blaze
    if collimator is not None:
        data["camera"]["collimator_focal_length_mm"] = collimator
    if sensitivity is not None:
        data["instrument"]["sensitivity_nm"] = sensitivity
    return profile_from_dict(data)


# ------------------------------------------------------------------------------------------------
# Published worked examples (reference-values.md §3)
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize(("beta_deg", "expected"), [
    (0.0, 1.11),    # small-angle d/(m f): verified on the source page
    (10.0, 1.094),  # with cos beta: computed in reference-values.md
    (20.0, 1.044),
    (30.0, 0.962),
])
def test_g4_central_dispersion_of_a_1200_per_mm_grating(beta_deg, expected):
    # G4: textbook problem, https://partnerperformance.uonbi.ac.ke/preguntia/14863443
    # (1200 grooves/mm, f = 0.75 m, first order). A 30-degree mount has beta = angle - 15 deg on
    # the camera axis, which meets the detector centre.
    plan = plan_setup(bench(1200.0, 1, 750.0, deviation=30.0), grating_angle_deg=15.0 + beta_deg)
    assert plan.beta_centre_deg == pytest.approx(beta_deg, abs=1e-9)
    per_mm = plan.points[1].dispersion_nm_per_px / PIXEL_MM
    assert per_mm == pytest.approx(expected, abs=0.5 * 10.0 ** -(len(str(expected)) - 2))


def test_g5_echelle_dispersion_at_61_deg_16_min():
    # G5: Skoog, Holler & Crouch, Principles of Instrumental Analysis 7th ed., problem 10-4 (as
    # stated on bartleby.com): echelle 120/mm, f = 0.85 m, beta = 61 deg 16', m = 30. Inputs and
    # formula verified there; P = 0.1571 nm/mm computed in reference-values.md. Littrow mount
    # (deviation 0) so that beta = the grating angle at the centre.
    plan = plan_setup(bench(120.0, 30, 850.0), grating_angle_deg=61.0 + 16.0 / 60.0)
    assert plan.points[1].dispersion_nm_per_px / PIXEL_MM == pytest.approx(0.1571, abs=5e-5)
    # ... and its free spectral range is lambda/m at the centre (definition in §3).
    assert plan.free_spectral_range_nm == pytest.approx(plan.central_wavelength_nm / 30, rel=1e-12)


# G6: IMAPS echelle, http://archive.stsci.edu/imaps/expastro/node5.html -- grating parameters
# (79 grooves/mm, theta_B = 63.43 deg, tan theta_B = 2) verified; outputs computed in
# reference-values.md from m lambda_B = 2 d sin theta_B = 22 643.7 nm.
G6_THETA = float(np.degrees(np.arctan(2.0)))


@pytest.mark.parametrize(("order", "lam_b", "fsr", "fsr_tol"), [
    (45, 503.194, 11.18, 0.005),
    (226, 100.193, 0.443, 0.0005),
    # reference-values.md prints 18.49, but its own 646.964/35 = 18.4847 rounds to 18.48 (see
    # test_optics.py); checked to the value of its formula.
    (35, 646.964, 646.964 / 35, 0.005),
])
def test_g6_imaps_echelle_solved_in_littrow(order, lam_b, fsr, fsr_tol):
    plan = plan_setup(bench(79.0, order, 1000.0, blaze=lam_b), central_wavelength_nm=lam_b)
    # Solving for the blaze wavelength at the centre of a Littrow mount finds the blaze angle
    # (lambda_B is rounded to 1 pm in the source row: 6e-4 deg at m = 226).
    assert plan.grating_angle_deg == pytest.approx(G6_THETA, abs=1e-3)
    assert plan.littrow_angle_deg == pytest.approx(G6_THETA, abs=1e-3)
    assert plan.blaze_angle_deg == pytest.approx(G6_THETA, abs=1e-3)
    assert plan.free_spectral_range_nm == pytest.approx(fsr, abs=fsr_tol)
    # Neighbouring orders m +- 1 land lambda m/(m +- 1) on the centre (§3: FSR definition).
    for other in (order - 1, order + 1):
        assert plan.pixel(lam_b * order / other, order=other) == pytest.approx(1023.5, abs=1e-6)
    # Scalar blaze: efficiency 1 at the blaze wavelength in Littrow.
    assert plan.points[1].blaze_efficiency == pytest.approx(1.0, abs=1e-6)


def test_g6_littrow_angular_dispersion():
    # G6 (computed in reference-values.md): D_Littrow = 2 tan(theta_B)/lambda = 7.95e-3 rad/nm, m = 45.
    plan = plan_setup(bench(79.0, 45, 1000.0), central_wavelength_nm=503.194)
    assert plan.angular_dispersion_rad_per_nm == pytest.approx(7.95e-3, abs=5e-6)


def test_g7_littrow_angle_dispersion_and_second_order():
    # G7: 1200/mm blazed at 500 nm in m = 1, f = 500 mm, Littrow; Littrow blaze condition
    # m lambda_B = 2 d sin theta_B from http://cryer.org.uk/echelette_grating; all outputs computed
    # in reference-values.md: theta_B = 17.458 deg, D = 1.258e-3 rad/nm, P = 1.590 nm/mm,
    # FSR(500 nm, m = 1) = 500 nm, and 2nd-order 250 nm lands on 1st-order 500 nm.
    profile = bench(1200.0, 1, 500.0, blaze=500.0, collimator=500.0, sensitivity=[200.0, 1100.0])
    plan = plan_setup(profile, central_wavelength_nm=500.0, slit_width_um=50.0)
    assert plan.grating_angle_deg == pytest.approx(17.458, abs=5e-4)
    assert plan.littrow_angle_deg == pytest.approx(17.458, abs=5e-4)
    assert plan.angular_dispersion_rad_per_nm == pytest.approx(1.258e-3, abs=5e-7)
    assert plan.points[1].dispersion_nm_per_px / PIXEL_MM == pytest.approx(1.590, abs=5e-4)
    assert plan.free_spectral_range_nm == pytest.approx(500.0, rel=1e-9)
    # Order overlap: order 2 brings 250 nm onto the pixel of 500 nm ...
    second = {o.order: o for o in plan.overlaps}[2]
    lo, hi = second.wavelength_range_nm
    assert lo < 250.0 < hi
    assert plan.pixel(250.0, order=2) == pytest.approx(plan.pixel(500.0), abs=1e-6)
    assert plan.pixel(500.0) == pytest.approx(1023.5, abs=1e-6)
    # ... within the stated sensitivity, so a long-pass filter is needed whose cut-on lies above
    # the 2nd-order band (half the 1st-order wavelengths) and below the shortest 1st-order one.
    band = plan.wavelength_range_nm
    f = plan.filters
    assert f.long_pass_needed and not f.short_pass_needed and f.clears_detector
    assert f.cut_on_window_nm == pytest.approx((band[1] / 2, band[0]), rel=1e-9)
    assert f.cut_on_window_nm[0] < f.cut_on_nm <= f.cut_on_window_nm[1]
    # Blaze efficiency 1 at the blaze wavelength in Littrow, falling off to both sides about
    # equally over this narrow range.
    eff = [p.blaze_efficiency for p in plan.points]
    assert eff[1] == pytest.approx(1.0, abs=1e-9)
    assert eff[0] < 1.0 and eff[2] < 1.0
    assert eff[0] == pytest.approx(eff[2], abs=0.01)


def test_slit_limited_resolving_power_in_littrow():
    # R = m lambda f_coll / (w d cos alpha) = f_coll (sin a + sin b) / (w cos a), in Littrow
    # 2 f_coll tan(theta) / w: the standard slit-limited result (from memory, e.g. Schroeder,
    # Astronomical Optics); it does not depend on the camera, which the test varies.
    for camera in (250.0, 500.0, 800.0):
        profile = bench(1200.0, 1, camera, collimator=500.0)
        plan = plan_setup(profile, central_wavelength_nm=500.0, slit_width_um=50.0)
        theta = np.radians(plan.grating_angle_deg)
        assert plan.points[1].resolving_power == pytest.approx(2 * 500.0 * np.tan(theta) / 0.050,
                                                               rel=1e-6)
        # slit image = w * (cos a / cos b) * f_cam / f_coll (anamorphic factor 1 in Littrow)
        assert plan.points[1].slit_image_px == pytest.approx(0.050 * camera / 500.0 / PIXEL_MM,
                                                             rel=1e-6)
        assert plan.points[1].sampling_resolving_power == pytest.approx(
            500.0 / (2 * plan.points[1].dispersion_nm_per_px), rel=1e-12)


def test_anamorphic_magnification_off_littrow():
    # cos(alpha)/cos(beta) enters the slit image; in a 30-degree mount alpha = beta + 30 deg.
    plan = plan_setup(bench(1200.0, 1, 300.0, deviation=30.0, collimator=600.0),
                      central_wavelength_nm=600.0, slit_width_um=100.0)
    centre = plan.points[1]
    a, b = np.radians(plan.alpha_deg), np.radians(centre.beta_deg)
    assert centre.anamorphic_magnification == pytest.approx(np.cos(a) / np.cos(b), rel=1e-12)
    assert centre.slit_image_px == pytest.approx(
        0.100 * np.cos(a) / np.cos(b) * 300.0 / 600.0 / PIXEL_MM, rel=1e-6)
    assert centre.resolution_nm == pytest.approx(centre.slit_image_px * centre.dispersion_nm_per_px,
                                                 rel=1e-12)


def test_no_collimator_or_no_slit_gives_only_the_sampling_limit():
    without = plan_setup(bench(1200.0, 1, 300.0, deviation=30.0), central_wavelength_nm=600.0,
                         slit_width_um=100.0)
    assert all(p.resolving_power is None and p.slit_image_px is None for p in without.points)
    assert any("no collimator focal length" in n for n in without.notes)
    no_slit = plan_setup(bench(1200.0, 1, 300.0, collimator=600.0), central_wavelength_nm=600.0)
    assert all(p.resolving_power is None for p in no_slit.points)
    assert all(p.sampling_resolving_power > 0 for p in no_slit.points)


# ------------------------------------------------------------------------------------------------
# Blaze (scalar approximation)
# ------------------------------------------------------------------------------------------------

def test_simple_blaze_function_half_power_points():
    # sinc^2(x) = 1/2 at x = 0.442946 (computed); with gamma = pi (1 - lambda_B/lambda) in first
    # order the half-efficiency points are lambda_B / (1 +- 0.442946) = 0.6930 and 1.7951 lambda_B,
    # the "about 2/3 and 1.8 lambda_B" rule of thumb for first-order blazed gratings (from memory).
    plan = plan_setup(load_profile("tho_transmission"), grating_angle_deg=0.0)
    blaze = 600.0
    eff = scalar_blaze_efficiency(plan.model, [blaze / 1.442946, blaze, blaze / 0.557054], 1,
                                  blaze_nm=blaze, blaze_order=1)
    assert eff == pytest.approx([0.5, 1.0, 0.5], abs=1e-5)


def test_facet_blaze_function_agrees_with_small_angle_form_near_littrow():
    profile = bench(600.0, 1, 300.0, blaze=500.0)
    plan = plan_setup(profile, central_wavelength_nm=500.0)
    lam = np.array([420.0, 460.0, 500.0, 540.0, 580.0])
    facet = scalar_blaze_efficiency(plan.model, lam, 1, blaze_nm=500.0, blaze_order=1)
    simple = np.sinc(1.0 - 500.0 / lam) ** 2
    assert facet[2] == pytest.approx(1.0, abs=1e-12)
    assert np.all(facet[[0, 1, 3, 4]] < 1.0)
    assert facet == pytest.approx(simple, abs=0.02)
    # the second order of half the blaze wavelength is at the blaze peak too (same facet angle)
    second = scalar_blaze_efficiency(plan.model, 250.0, 2, blaze_nm=500.0, blaze_order=1)
    assert second == pytest.approx(1.0, abs=1e-12)


def test_no_blaze_in_profile_means_no_efficiency():
    plan = plan_setup(load_profile("tho_transmission"), grating_angle_deg=0.0)
    assert plan.blaze_nm is None
    assert all(p.blaze_efficiency is None for p in plan.points)
    assert plan.lines["efficiency"].isna().all()


# ------------------------------------------------------------------------------------------------
# Solving for the angle; bad input
# ------------------------------------------------------------------------------------------------

@pytest.mark.parametrize(("name", "centre"), [
    ("tho_longslit", 656.28), ("tho_longslit", 400.0), ("tho_transmission", 560.0),
    ("tho_grism", 610.0),
])
def test_central_wavelength_round_trip(name, centre):
    profile = load_profile(name)
    plan = plan_setup(profile, central_wavelength_nm=centre)
    assert plan.solved_for_nm == centre
    assert plan.central_wavelength_nm == pytest.approx(centre, abs=1e-6)
    again = plan_setup(profile, grating_angle_deg=plan.grating_angle_deg)
    assert again.central_wavelength_nm == pytest.approx(centre, abs=1e-6)
    assert again.wavelength_range_nm == pytest.approx(plan.wavelength_range_nm, abs=1e-9)


def test_transmission_grating_picks_the_root_nearest_zero():
    # lambda_c = 2 d sin(D/2) cos(phi - D/2) / m is symmetric about phi = D/2: two angles work.
    profile = load_profile("tho_transmission")
    phi = solve_grating_angle(nominal_model(profile), 560.0)
    other = profile.grating.deviation_deg - phi
    assert abs(phi) < abs(other)
    assert plan_setup(profile, grating_angle_deg=other).central_wavelength_nm == pytest.approx(560.0, abs=1e-6)
    # beyond the minimum-deviation maximum 2 d sin(D/2) = 607.5 nm nothing reaches the centre
    with pytest.raises(ValueError, match="out of reach"):
        solve_grating_angle(nominal_model(profile), 2 * 1e6 / 600.0 * np.sin(np.radians(10.5)) + 0.5)


def test_unreachable_wavelength_names_the_profile_and_the_range():
    profile = load_profile("tho_longslit")
    with pytest.raises(PlanningError, match=r"tho_longslit\.toml.*2500 nm is out of reach.*nm at the"):
        plan_setup(profile, central_wavelength_nm=2500.0)


@pytest.mark.parametrize("options", [
    {},
    {"grating_angle_deg": 20.0, "central_wavelength_nm": 600.0},
    {"grating_angle_deg": 20.0, "slit_width_um": -5.0},
    {"grating_angle_deg": 20.0, "binning": (1,)},
    {"grating_angle_deg": float("nan")},
    {"grating_angle_deg": -40.0},   # negative wavelengths on the detector
])
def test_bad_options_raise_planning_error(options):
    with pytest.raises(PlanningError, match="tho_longslit"):
        plan_setup(load_profile("tho_longslit"), **options)


def test_unknown_geometry_takes_no_setting_and_says_so():
    profile = load_profile("tho_approximate")
    plan = plan_setup(profile)
    assert plan.central_wavelength_nm == pytest.approx(560.0, rel=1e-6)
    assert plan.points[1].dispersion_nm_per_px == pytest.approx(0.2, rel=1e-6)
    assert plan.grating_angle_deg is None and plan.sensitivity_assumed
    assert any("Geometry unknown" in n for n in plan.notes)
    assert any("300–1100 nm assumed" in n for n in plan.notes)
    with pytest.raises(PlanningError, match="geometry unknown"):
        plan_setup(profile, central_wavelength_nm=500.0)


def test_binning_halves_the_pixels_and_doubles_the_dispersion():
    profile = load_profile("tho_longslit")
    one = plan_setup(profile, grating_angle_deg=25.0)
    two = plan_setup(profile, grating_angle_deg=25.0, binning=(1, 2))
    assert two.n_pixels == one.n_pixels // 2
    assert two.points[1].dispersion_nm_per_px == pytest.approx(2 * one.points[1].dispersion_nm_per_px,
                                                               rel=1e-3)
    assert two.wavelength_range_nm == pytest.approx(one.wavelength_range_nm, abs=0.05)


def test_decreasing_wavelength_detector():
    plan = plan_setup(load_profile("tho_transmission"), grating_angle_deg=0.0)
    assert not plan.wavelength_increases
    assert plan.points[0].wavelength_nm > plan.points[2].wavelength_nm
    lo, hi = plan.wavelength_range_nm
    assert lo == plan.points[2].wavelength_nm and hi == plan.points[0].wavelength_nm


# ------------------------------------------------------------------------------------------------
# Order overlap and filters
# ------------------------------------------------------------------------------------------------

def test_clean_range_follows_m_lambda_equals_m_prime_lambda_prime():
    # 300/mm, f = 200 mm, first order around 600 nm (about 345-853 nm), sensitive 330-1000 nm:
    # 2nd-order light (>= 330 nm) lands on 1st-order 660 nm and beyond, so 345-660 nm is clean
    # without a filter; a 450 nm long-pass moves the limit to 900 nm (beyond the detector) and
    # loses 345-450 nm. Checked to the half-pixel grid (a pixel is 0.25 nm here).
    plan = plan_setup(bench(300.0, 1, 200.0, sensitivity=[330.0, 1000.0]), central_wavelength_nm=600.0)
    lo, hi = plan.wavelength_range_nm
    step = plan.points[1].dispersion_nm_per_px
    sens = (330.0, 1000.0)
    assert clean_range(plan.model, sens) == pytest.approx((lo, 660.0), abs=step)
    assert clean_range(plan.model, sens, cut_on_nm=450.0) == pytest.approx((450.0, hi), abs=step)
    # Second order around 400 nm (about 389-411 nm), sensitive 200-1000 nm: 1st-order light
    # lands at twice, 3rd-order light at 2/3 of its wavelength: nothing is clean without filters,
    # all of it between a 300 nm long-pass and a 600 nm short-pass.
    second = plan_setup(bench(1200.0, 2, 500.0), central_wavelength_nm=400.0)
    band = second.wavelength_range_nm
    assert clean_range(second.model, (200.0, 1000.0)) is None
    assert clean_range(second.model, (200.0, 1000.0), cut_on_nm=300.0, cut_off_nm=600.0) == \
        pytest.approx(band, abs=1e-9)


def test_second_order_setting_needs_long_and_short_pass():
    # 1200/mm in order 2 at 400 nm (about 389-411 nm), sensitive 200-1000 nm: order 3 brings
    # 259-274 nm, order 1 778-822 nm onto the detector.
    plan = plan_setup(bench(1200.0, 2, 500.0, sensitivity=[200.0, 1000.0]), central_wavelength_nm=400.0)
    orders = {o.order for o in plan.overlaps}
    assert {1, 3, 4} <= orders
    f = plan.filters
    lo, hi = plan.wavelength_range_nm
    assert f.long_pass_needed and f.short_pass_needed and f.clears_detector
    assert f.cut_on_window_nm == pytest.approx((2 * hi / 3, lo), rel=1e-9)     # order 3: 2/3 of lambda
    assert f.cut_off_window_nm == pytest.approx((hi, 2 * lo), rel=1e-9)        # order 1: 2 lambda


def test_detector_wider_than_a_free_spectral_range_is_flagged():
    # 300/mm, short camera: the first-order range spans more than an octave of the sensitive range.
    plan = plan_setup(bench(300.0, 1, 100.0, sensitivity=[330.0, 1000.0]), central_wavelength_nm=700.0)
    lo, hi = plan.wavelength_range_nm
    assert hi > 2 * max(lo, 330.0)
    f = plan.filters
    assert f.long_pass_needed and f.cut_on_window_nm is None and not f.clears_detector
    step = plan.points[1].dispersion_nm_per_px
    # the suggested cut-on is just above half the longest detectable wavelength (1000 nm); the
    # clean range then runs from the cut-on to the sensitivity limit
    assert f.cut_on_nm == pytest.approx(500.0, abs=1.0)
    assert f.clean_range_nm == pytest.approx((f.cut_on_nm, min(hi, 1000.0)), abs=step)
    assert any("more than a free spectral range" in w for w in plan.warnings)


def test_ghosts_are_listed_lines_of_other_orders_where_the_grating_equation_puts_them():
    plan = plan_setup(load_profile("tho_longslit"), central_wavelength_nm=760.0)
    ghosts = plan.ghosts(("Ar",))
    assert len(ghosts) > 0 and (ghosts["order"] == 2).all()
    # each lands where 2 lambda' is the working-order wavelength
    assert ghosts["apparent_wavelength_nm"].to_numpy() == pytest.approx(2 * ghosts["wavelength_nm"].to_numpy(),
                                                                         abs=1e-6)
    # the suggested long-pass (cut-on below the detector range) blocks the sensitive ones
    sensitive = ghosts[ghosts["sensitive"]]
    assert sensitive["filtered"].all()
    assert (sensitive["wavelength_nm"] < plan.filters.cut_on_nm).all()


@pytest.mark.parametrize(("name", "options"), [
    ("tho_longslit", {"central_wavelength_nm": 760.0}),
    ("tho_longslit", {"central_wavelength_nm": 450.0}),
    ("tho_grism", {"grating_angle_deg": 0.0}),
    ("tho_transmission", {"grating_angle_deg": 0.0}),
])
def test_no_detectable_ghost_passes_the_filter_into_the_clean_range(name, options):
    plan = plan_setup(load_profile(name), **options)
    clean = plan.filters.clean_range_nm
    assert clean is not None
    ghosts = plan.ghosts()
    passing = ghosts[ghosts["sensitive"] & ~ghosts["filtered"]]
    inside = passing["apparent_wavelength_nm"].between(*clean)
    assert not inside.any(), passing[inside]


# ------------------------------------------------------------------------------------------------
# Lamps
# ------------------------------------------------------------------------------------------------

def _table(rows):
    columns = ["element", "order", "x", "weak", "blend", "strong", "sensitive", "filtered"]
    return pd.DataFrame(rows, columns=columns)


def test_lamp_score_counts_gap_thirds_crowding_and_ghosts():
    rows = [
        ("Ne", 1, 100.0, False, False, True, True, False),
        ("Ne", 1, 2000.0, False, False, False, True, False),
        ("Ne", 1, 2002.0, False, False, True, True, False),   # 2 px from the previous: crowded
        ("Ne", 1, 3000.0, True, False, False, True, False),   # weak: counted, not usable
        ("Ne", 1, 3001.0, False, False, True, True, False),   # weak neighbour does not crowd
        ("Ne", 1, 3500.0, False, True, True, True, False),    # listed blend: not usable
        ("Ne", 2, 1000.0, False, False, True, True, False),   # ghost, left by the filter
        ("Ne", 2, 1500.0, False, False, True, True, True),    # ghost blocked by the filter
        ("Ne", 1, 3900.0, False, False, True, False, False),  # outside the sensitivity range
        ("Ar", 1, 4000.0, False, False, True, True, False),   # another element
    ]
    s = score_lamps(_table(rows), ("Ne",), order=1, n_pixels=4096, line_width_px=2.0)
    assert s.n_lines == 6 and s.n_strong == 4
    assert s.n_usable == 2 and s.n_strong_usable == 2          # x = 100 and 3001
    assert s.largest_gap_fraction == pytest.approx(2901.0 / 4095.0)
    assert s.thirds_covered == 2
    assert (s.n_ghosts, s.n_ghosts_left) == (2, 1)
    assert s.score == pytest.approx(2 + 2 - 30 * 2901.0 / 4095.0 - 1)
    assert s.rating == "poor"
    both = score_lamps(_table(rows), ("Ne", "Ar"), order=1, n_pixels=4096, line_width_px=2.0)
    assert both.n_usable == 3 and both.thirds_covered == 2     # 3001 and 4000 share a third
    assert both.largest_gap_fraction == pytest.approx(2901.0 / 4095.0)
    assert both.score == pytest.approx(3 + 3 - 30 * 2901.0 / 4095.0 - 1 - 4)


def test_lamp_ranking_is_consistent_with_its_scores():
    plan = plan_setup(load_profile("tho_longslit"), central_wavelength_nm=760.0, slit_width_um=50.0)
    scores = [s.score for s in plan.recommended]
    assert scores == sorted(scores, reverse=True)
    assert {s.lamps[0] for s in plan.lamps} == set(plan.lines["element"]) | {s.lamps[0] for s in plan.lamps}
    for s in plan.recommended:
        assert 1 <= len(s.lamps) <= 3
        # recomputing from the table gives the same numbers
        again = score_lamps(plan.lines, s.lamps, order=1, n_pixels=plan.n_pixels,
                            line_width_px=plan.line_width_px)
        assert again == s
        # the working-order lines counted are the ones the plan lists for those lamps
        table = plan.lines_for(s.lamps)
        assert s.n_lines == int(table["sensitive"].sum())
    # the profile's own lamps (Hg+Ar) are scored the same way
    assert plan.profile_lamps == score_lamps(plan.lines, ("Hg", "Ar"), order=1, n_pixels=plan.n_pixels,
                                             line_width_px=plan.line_width_px)
    # Hg has one listed line in 676-842 nm and is poor alone; the best mix is solid.
    hg = {s.label: s for s in plan.lamps}["Hg"]
    assert hg.rating == "poor" and hg.n_lines == 1
    assert plan.recommended[0].rating == "solid"


# ------------------------------------------------------------------------------------------------
# Consistency with the simulator and the peak finder
# ------------------------------------------------------------------------------------------------

FIXED = {"angle_error_deg": 0.0, "focal_error_fraction": 0.0, "axis_error_px": 0.0,
         "tilt_error_deg": 0.0, "distortion_px": (0.0, 0.0, 0.0, 0.0)}


@pytest.fixture(scope="module")
def simulated():
    profile = load_profile("tho_longslit")
    plan = plan_setup(profile, central_wavelength_nm=700.0)
    angle = round(plan.grating_angle_deg, 4)  # the simulator's header holds 4 decimals
    arc = simulate_arc(profile, seed=20260, lamps="Hg+Ar", grating_angle_deg=angle, **FIXED)
    return plan_setup(profile, grating_angle_deg=angle), arc


def test_simulated_lines_land_where_planned(simulated):
    plan, arc = simulated
    lines = arc.lines
    n = plan.n_pixels
    listed = lines[lines["listed"] & ~lines["ghost"]]
    assert len(listed) >= 10
    predicted = plan.pixel(listed["wavelength_nm"].to_numpy())
    assert np.max(np.abs(predicted - listed["x_true"].to_numpy())) < 1.0
    # every listed line the simulator put on the detector is in the plan's Hg+Ar table
    on = listed[(listed["x_true"] >= -0.5) & (listed["x_true"] <= n - 0.5)]
    planned = plan.lines_for(("Hg", "Ar"))
    assert set(np.round(on["wavelength_nm"], 6)) <= set(np.round(planned["wavelength_nm"], 6))
    # the simulator's next-order ghosts are ghosts of the plan at the same pixels
    ghosts = lines[lines["ghost"]]
    for row in ghosts.itertuples():
        x = plan.pixel(row.wavelength_nm, order=row.order)
        assert abs(x - row.x_true) < 1.0
    inside = ghosts[(ghosts["x_true"] >= -0.5) & (ghosts["x_true"] <= n - 0.5)]
    planned_ghosts = plan.ghosts(("Hg", "Ar"))
    assert set(np.round(inside["wavelength_nm"], 6)) <= set(np.round(planned_ghosts["wavelength_nm"], 6))


def test_peaks_found_in_the_simulated_frame_sit_at_planned_positions(simulated):
    plan, arc = simulated
    frame = frame_from_array(arc.data, arc.profile, header=arc.header)
    peaks = find_peaks(extract_spectrum(frame)).table
    lines = arc.lines
    clear = lines[lines["listed"] & ~lines["ghost"] & (lines["snr"] > 30) & ~lines["saturated"]]
    x_all = np.sort(lines["x_true"].to_numpy())
    isolated = [row for row in clear.itertuples()
                if np.sort(np.abs(x_all - row.x_true))[1] > 3 * row.fwhm_px
                and 5 < row.x_true < plan.n_pixels - 6]
    assert len(isolated) >= 6
    found = peaks["x"].to_numpy()
    offsets = []
    for row in isolated:
        planned = float(plan.pixel(row.wavelength_nm))
        offsets.append(np.min(np.abs(found - planned)))
        assert offsets[-1] < 1.0, row.wavelength_nm
    # at S/N > 30 the measured centres scatter by hundredths of a pixel around the plan
    assert np.median(offsets) < 0.1


# ------------------------------------------------------------------------------------------------
# Products: JSON, table, plot, command line
# ------------------------------------------------------------------------------------------------

def test_json_round_trip_and_atomic_write(tmp_path):
    plan = plan_setup(load_profile("tho_longslit"), central_wavelength_nm=760.0, slit_width_um=50.0)
    path = plan.to_json(tmp_path / "sub" / "plan.json")
    text = path.read_text(encoding="utf-8")
    assert "NaN" not in text
    data = json.loads(text)
    assert data == json.loads(json.dumps(plan.summary()))
    assert (data["schema"], data["schema_version"]) == ("wavecal-plan", 2)
    assert data["points"][1]["wavelength_nm"] == pytest.approx(760.0, abs=1e-6)
    assert len(data["lines"]) == len(plan.lines)
    assert [r["lamps"] for r in data["recommended"]] == [list(s.lamps) for s in plan.recommended]
    assert [p.name for p in path.parent.iterdir()] == ["plan.json"]  # no temporary file left


def test_table_mentions_the_key_numbers():
    plan = plan_setup(load_profile("tho_longslit"), central_wavelength_nm=760.0, slit_width_um=50.0)
    text = format_plan(plan)
    lo, hi = plan.wavelength_range_nm
    assert f"{lo:.2f} – {hi:.2f} nm" in text
    assert "long-pass needed" in text and f"suggested {plan.filters.cut_on_nm:g} nm" in text
    assert plan.recommended[0].label in text
    assert "R (2 px)" in text and "blaze eff." in text


def test_plot_is_a_png(tmp_path):
    plan = plan_setup(load_profile("tho_longslit"), central_wavelength_nm=760.0)
    path = save_plan_plot(plan, tmp_path / "plan.png")
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 20_000
    plain = plan_setup(load_profile("tho_transmission"), grating_angle_deg=0.0)  # no blaze, no overlap
    assert save_plan_plot(plain, tmp_path / "plain.png").read_bytes()[:4] == b"\x89PNG"


def _run(argv):
    parser = argparse.ArgumentParser()
    add_plan_arguments(parser)
    return run_plan_command(parser.parse_args(argv))


def test_cli_exit_codes_and_products(tmp_path, capsys):
    assert _run(["-p", "tho_longslit", "--central-wavelength", "760", "--slit-width", "50",
                 "-o", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "setup plan" in out and "written:" in out
    assert sorted(p.name for p in tmp_path.iterdir()) == ["tho_longslit_760nm.plan.json",
                                                          "tho_longslit_760nm.plan.png"]
    # warnings (part of the detector beyond the 1000 nm sensitivity limit) -> 3
    assert _run(["-p", "tho_longslit", "--central-wavelength", "1000"]) == 3
    capsys.readouterr()
    # --json prints parseable JSON only
    assert _run(["-p", "tho_longslit", "--grating-angle", "25", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["grating_angle_deg"] == 25.0
    # bad input -> 1, with the file named
    assert _run(["-p", "tho_longslit", "--central-wavelength", "2500"]) == 1
    assert "out of reach" in capsys.readouterr().err
    assert _run(["-p", str(tmp_path / "missing.toml"), "--grating-angle", "20"]) == 1
    assert "missing.toml" in capsys.readouterr().err
    # no setting for a grating without a header default -> usage error 2
    assert _run(["-p", "tho_longslit"]) == 2
    # a fixed grism takes its header default; an unknown geometry needs no setting
    assert _run(["-p", "tho_grism"]) in (0, 3)
    assert _run(["-p", "tho_approximate", "--binning", "2"]) in (0, 3)
    capsys.readouterr()
    parser = argparse.ArgumentParser()
    add_plan_arguments(parser)
    with pytest.raises(SystemExit):
        parser.parse_args(["-p", "x", "--grating-angle", "1", "--central-wavelength", "500"])
    with pytest.raises(SystemExit):
        parser.parse_args(["-p", "x", "--slit-width", "-3"])
