"""Tests of :mod:`wavecal.optics` against outside sources and against astropy.wcs.

Sources named beside the check values:

* ``reference-values.md §3`` rows G1–G7 (grating worked examples). Each row says which
  numbers were verified on the cited page and which were computed from the standard formulas;
  the comments below repeat that status.
* ``fits-wcs-grating.md`` (FITS WCS Paper III, Greisen et al. 2006, A&A 446, 747, as implemented
  by WCSLIB inside astropy.wcs): the reflection-grating worked example (§2) and the MARS grism
  check values (§1, WCSLIB's ``tspc.c`` case of Paper III Fig. 5).
* astropy.wcs itself, run live: a ``-GRI``/``-GRA`` header built from a :class:`GratingModel`
  by :func:`wavecal.wcs_grating.grating_header` must give the same wavelength as the model at every pixel.
"""
from __future__ import annotations

import numpy as np
import pytest
from astropy.io import fits
from astropy.wcs import WCS
from scipy.optimize import brentq

from wavecal.optics import (
    GratingModel,
    angular_dispersion,
    diffraction_angle,
    free_spectral_range,
    littrow_blaze_wavelength,
    mount_angles,
    reciprocal_linear_dispersion,
    resolving_power,
    wavelength_from_angles,
)
from wavecal.wcs_grating import grating_header


def _wcs_wavelength_nm(header: fits.Header, x) -> np.ndarray:
    """astropy's wavelength (nm) at 0-based pixel(s) ``x`` (passed as FITS pixel x + 1)."""
    w = WCS(header)
    assert list(w.wcs.cunit) == ["m"]  # -GRI/-GRA always return SI (fits-wcs-grating.md §5.2)
    return w.wcs_pix2world(np.asarray(x, dtype=float) + 1.0, 1)[0] * 1e9


def _wcs_pixel(header: fits.Header, wavelength_nm) -> np.ndarray:
    """astropy's 0-based pixel for wavelength(s) in nm."""
    return WCS(header).wcs_world2pix(np.asarray(wavelength_nm, dtype=float) * 1e-9, 1)[0] - 1.0


# The reflection-grating worked example of fits-wcs-grating.md §2: 1200/mm, m = 1, grating rotation
# 20 deg, collimator-camera angle 30 deg, f = 300 mm, 15 um pixels, detector tilt 3 deg, 4096 px,
# camera axis on FITS pixel 2048.5 (0-based 2047.5).
WORKED = GratingModel(mount="reflection", grooves_per_mm=1200.0, order=1, grating_angle_deg=20.0,
                      deviation_deg=30.0, focal_length_mm=300.0, pixel_mm=0.015,
                      axis_pixel=2047.5, n_pixels=4096, tilt_deg=3.0)


# --------------------------------------------------------------------------------------------
# G1–G7: grating worked examples (reference-values.md §3)
# --------------------------------------------------------------------------------------------

# G1: Resnick–Halliday–Krane problem, http://learningphysics.org/optics/opt0131.htm
# 40 000 rulings over 76 mm (d = 1900.0 nm), sodium 589 nm, normal incidence.
# Inputs and R = mN verified on the page; beta and D computed in reference-values.md from the
# grating equation (the page's equations are images).
G1_GROOVES_PER_MM = 40_000 / 76.0
G1_ROWS = [  # order, beta [deg] (computed), D [rad/nm] (computed), D [deg/nm] (computed), R (verified)
    (1, 18.06, 5.536e-4, 0.0317, 40_000),
    (2, 38.32, 1.342e-3, 0.0769, 80_000),
    (3, 68.43, 4.296e-3, 0.2461, 120_000),
]


@pytest.mark.parametrize(("order", "beta_deg", "disp_rad", "disp_deg", "r_source"), G1_ROWS)
def test_g1_transmission_grating_sodium(order, beta_deg, disp_rad, disp_deg, r_source):
    beta = diffraction_angle(589.0, G1_GROOVES_PER_MM, order, 0.0)
    assert beta == pytest.approx(beta_deg, abs=0.005)  # 2 decimals in the source row
    disp = angular_dispersion(beta, G1_GROOVES_PER_MM, order)
    assert disp == pytest.approx(disp_rad, abs=disp_rad * 1e-3 / 2)  # 4 significant digits
    assert np.degrees(disp) == pytest.approx(disp_deg, abs=5e-5)
    # R = mN: the Rayleigh limit -- angular half-width of the principal maximum lambda/(N d cos beta)
    # divided by the angular dispersion -- must give lambda/dlambda = mN with N = 40 000.
    d_nm = 76e6 / 40_000
    half_width = 589.0 / (40_000 * d_nm * np.cos(np.radians(beta)))
    assert resolving_power(589.0, half_width / disp) == pytest.approx(r_source, rel=1e-12)
    # The same line through a transmission mount at normal incidence with the camera pointed at beta
    # lands on the camera-axis pixel.
    model = GratingModel(mount="transmission", grooves_per_mm=G1_GROOVES_PER_MM, order=order,
                         grating_angle_deg=0.0, deviation_deg=float(beta), focal_length_mm=200.0,
                         pixel_mm=0.01, axis_pixel=511.5, n_pixels=1024)
    assert model.wavelength(511.5) == pytest.approx(589.0, rel=1e-12)


def test_g2_resolving_sodium_doublet():
    # G2: http://www.phys4arab.net/vb/showpost.php?p=561547&postcount=2 -- outputs verified:
    # R = 589.30/0.59 = 999 (998.8); N = R/m = 500 (499.4) in 2nd order.
    d2, d1 = 589.00, 589.59
    r = resolving_power(0.5 * (d1 + d2), d1 - d2)
    assert r == pytest.approx(998.8, abs=0.05)
    assert round(float(r)) == 999
    assert r / 2 == pytest.approx(499.4, abs=0.05)
    assert int(np.ceil(r / 2)) == 500


@pytest.mark.parametrize(("beta_deg", "expected"), [
    (0.0, 1.11),    # small-angle d/(m f): verified on the source page
    (10.0, 1.094),  # with cos beta: computed in reference-values.md
    (20.0, 1.044),
    (30.0, 0.962),
])
def test_g4_reciprocal_linear_dispersion_1200_per_mm(beta_deg, expected):
    # G4: textbook problem, https://partnerperformance.uonbi.ac.ke/preguntia/14863443
    # (1200 grooves/mm, f = 0.75 m, first order).
    p = reciprocal_linear_dispersion(beta_deg, 1200.0, 1, 750.0)
    assert p == pytest.approx(expected, abs=0.5 * 10.0 ** -(len(str(expected)) - 2))


def test_g5_echelle_reciprocal_linear_dispersion():
    # G5: Skoog, Holler & Crouch, Principles of Instrumental Analysis 7th ed., problem 10-4
    # (as stated on bartleby.com): echelle 120/mm, f = 0.85 m, beta = 61 deg 16', m = 30.
    # Inputs and formula verified there; P = d cos(beta) / (m f) = 0.1571 nm/mm computed in
    # reference-values.md. (Its intermediate "cos beta = 0.48068" is a slip: cos 61 deg 16' = 0.48073;
    # the result 0.1571 holds either way.)
    beta = 61.0 + 16.0 / 60.0
    assert reciprocal_linear_dispersion(beta, 120.0, 30, 850.0) == pytest.approx(0.1571, abs=5e-5)


# G6: IMAPS echelle, http://archive.stsci.edu/imaps/expastro/node5.html -- grating parameters
# (79 grooves/mm, theta_B = 63.43 deg, tan theta_B = 2) verified; outputs computed in
# reference-values.md. 63.43 deg is atan(2) rounded; the outputs (m lambda_B = 22 643.7 nm) use
# tan theta_B = 2 exactly (63.43 deg itself would give 503.17 nm in m = 45).
G6_THETA = float(np.degrees(np.arctan(2.0)))


@pytest.mark.parametrize(("order", "lam_b", "fsr", "fsr_tol"), [
    (45, 503.194, 11.18, 0.005),
    (226, 100.193, 0.443, 0.0005),
    # reference-values.md prints 18.49 here, but its own 646.964/35 = 18.4847 rounds to 18.48;
    # the test uses the row's lambda_B and the stated formula FSR = lambda/m, to 2 decimals.
    (35, 646.964, 646.964 / 35, 0.005),
])
def test_g6_imaps_echelle_littrow_blaze(order, lam_b, fsr, fsr_tol):
    lam = littrow_blaze_wavelength(G6_THETA, 79.0, order)
    assert order * lam == pytest.approx(22_643.7, abs=0.05)
    assert lam == pytest.approx(lam_b, abs=5e-4)
    assert free_spectral_range(lam, order) == pytest.approx(fsr, abs=fsr_tol)
    # In Littrow (alpha = beta = theta_B) the blaze wavelength satisfies the grating equation ...
    assert diffraction_angle(lam, 79.0, order, G6_THETA) == pytest.approx(G6_THETA, abs=1e-9)
    # ... and the angular dispersion is 2 tan(theta_B)/lambda.
    assert angular_dispersion(G6_THETA, 79.0, order) == pytest.approx(
        2 * np.tan(np.radians(G6_THETA)) / lam, rel=1e-12)


def test_g6_littrow_angular_dispersion_value():
    # G6 (computed in reference-values.md): D_Littrow = 7.95e-3 rad/nm at m = 45.
    assert angular_dispersion(G6_THETA, 79.0, 45) == pytest.approx(7.95e-3, abs=5e-6)


def test_g7_first_order_littrow_blaze():
    # G7: Littrow blaze m lambda_B = 2 d sin theta_B (echelette page http://cryer.org.uk/echelette_grating);
    # 1200/mm blazed at 500 nm in m = 1, f = 500 mm; all outputs computed in reference-values.md.
    theta = brentq(lambda t: littrow_blaze_wavelength(t, 1200.0, 1) - 500.0, 1.0, 80.0, xtol=1e-12)
    assert theta == pytest.approx(17.458, abs=5e-4)
    disp = angular_dispersion(theta, 1200.0, 1)
    assert disp == pytest.approx(1.258e-3, abs=5e-7)
    assert np.degrees(disp) == pytest.approx(0.0721, abs=5e-5)
    assert reciprocal_linear_dispersion(theta, 1200.0, 1, 500.0) == pytest.approx(1.590, abs=5e-4)
    assert free_spectral_range(500.0, 1) == pytest.approx(500.0)
    # A reflection mount with zero collimator-camera angle is Littrow: 500 nm on the camera axis.
    littrow = GratingModel(mount="reflection", grooves_per_mm=1200.0, order=1, grating_angle_deg=theta,
                           deviation_deg=0.0, focal_length_mm=500.0, pixel_mm=0.015,
                           axis_pixel=1023.5, n_pixels=2048)
    assert littrow.wavelength(1023.5) == pytest.approx(500.0, rel=1e-12)
    # Second order of 250 nm lands on first-order 500 nm (the order-sorting problem of G7).
    assert diffraction_angle(250.0, 1200.0, 2, theta) == pytest.approx(
        diffraction_angle(500.0, 1200.0, 1, theta), abs=1e-12)


# --------------------------------------------------------------------------------------------
# FITS WCS Paper III (-GRI / -GRA) as implemented by astropy.wcs
# --------------------------------------------------------------------------------------------

def test_worked_example_matches_published_range_and_header():
    # fits-wcs-grating.md §2 output: range 4662.515572203335 .. 6351.108692872117 A over FITS pixels
    # 1 .. 4096; CRVAL1 = 5506.1014924892015 A, CDELT1 = 0.41451226995013873 A (both printed there).
    lam = WORKED.wavelength(np.array([0.0, 4095.0])) * 10.0
    assert lam[0] == pytest.approx(4662.5156, abs=5e-5)
    assert lam[1] == pytest.approx(6351.1087, abs=5e-5)
    h = grating_header(WORKED)
    assert h["CRPIX1"] == 2048.5
    assert h["CRVAL1"] == pytest.approx(5506.1014924892015, rel=1e-13)
    assert h["CDELT1"] == pytest.approx(0.41451226995013873, rel=1e-13)
    assert [h[f"PV1_{i}"] for i in range(7)] == pytest.approx([1.2e6, 1, 35.0, 1.0, 0.0, 0.0, 3.0])
    assert WORKED.central_wavelength() * 10.0 == pytest.approx(5506.1014924892015, rel=1e-13)


def _variants():
    """Distortion-free models (one per mount, with signs and tilts varied) for the astropy checks."""
    yield "worked", WORKED
    yield "worked-reversed", WORKED.with_parameters(direction=-1)
    yield "transmission", GratingModel(
        mount="transmission", grooves_per_mm=300.0, order=1, grating_angle_deg=5.0,
        deviation_deg=12.0, focal_length_mm=150.0, pixel_mm=0.0135, axis_pixel=1000.3,
        n_pixels=2048, tilt_deg=-1.5, direction=-1)
    yield "transmission-order-1", GratingModel(  # m = -1 with alpha, beta < 0
        mount="transmission", grooves_per_mm=300.0, order=-1, grating_angle_deg=-5.0,
        deviation_deg=-10.0, focal_length_mm=150.0, pixel_mm=0.0135, axis_pixel=1023.5,
        n_pixels=2048, tilt_deg=2.0)
    yield "grism", GratingModel(  # shaped like the invented Tamsin Hill grism profile, tilted
        mount="grism", grooves_per_mm=300.0, order=1, grating_angle_deg=0.5, deviation_deg=0.0,
        focal_length_mm=200.0, pixel_mm=0.015, axis_pixel=1060.0, n_pixels=2048, tilt_deg=2.0,
        prism_apex_deg=20.0, prism_index=1.52, prism_index_slope_per_nm=-4.0e-5,
        prism_reference_nm=600.0)


VARIANTS = dict(_variants())


@pytest.mark.parametrize("name", list(VARIANTS))
@pytest.mark.parametrize(("ctype", "cunit"), [("WAVE-GRI", "Angstrom"), ("AWAV-GRA", "nm")])
@pytest.mark.parametrize("where", ["axis", "first", "late"])
def test_model_agrees_with_astropy_wcs(name, ctype, cunit, where):
    model = VARIANTS[name]
    ref = {"axis": None, "first": 0.0, "late": 0.73 * model.n_pixels}[where]
    h = grating_header(model, ctype=ctype, cunit=cunit, reference_pixel=ref)
    x = np.arange(model.n_pixels, dtype=float)
    lam_model = model.wavelength(x)
    lam_wcs = _wcs_wavelength_nm(h, x)
    assert np.all(np.isfinite(lam_wcs))
    np.testing.assert_allclose(lam_model, lam_wcs, rtol=1e-9, atol=0)
    # Direction: the sign of CDELT1 is the sign of dlambda/dx.
    assert np.sign(h["CDELT1"]) == np.sign(lam_model[-1] - lam_model[0])
    # Inverse: astropy's world2pix and GratingModel.pixel agree.
    np.testing.assert_allclose(_wcs_pixel(h, lam_model), x, rtol=0, atol=1e-6)
    np.testing.assert_allclose(model.pixel(lam_model), x, rtol=0, atol=1e-6)


def test_cdelt_is_astropy_derivative_at_reference_pixel():
    # fits-wcs-grating.md §1: CDELT is the exact d(lambda)/dp at CRPIX; also GratingModel.dispersion.
    h = grating_header(WORKED, cunit="nm")
    lo, hi = _wcs_wavelength_nm(h, WORKED.axis_pixel + np.array([-1e-3, 1e-3]))
    assert (hi - lo) / 2e-3 == pytest.approx(h["CDELT1"], rel=1e-8)
    assert WORKED.dispersion(WORKED.axis_pixel) == pytest.approx(h["CDELT1"], rel=1e-9)


# MARS grism, fits-wcs-grating.md §1 (WCSLIB tspc.c, Paper III Fig. 5): AWAV-GRA, CUNIT1 Angstrom,
# G = 4.5e5 /m, m = 1, alpha = 27 deg, n_r = 1.765, n'_r = -1.077e6 /m, CRPIX1 719.8,
# CRVAL1 7245.2 A, CDELT1 2.956 A; astropy gives 5298.341, 7245.200, 10239.256 A at pixels 1, 719.8, 1700.
MARS_HEADER = {"CTYPE1": "AWAV-GRA", "CUNIT1": "Angstrom", "CRPIX1": 719.8, "CRVAL1": 7245.2,
               "CDELT1": 2.956, "PV1_0": 4.5e5, "PV1_1": 1, "PV1_2": 27.0, "PV1_3": 1.765,
               "PV1_4": -1.077e6}
MARS_CHECK = [(1.0, 5298.341), (719.8, 7245.200), (1700.0, 10239.256)]  # (FITS pixel, air A)


def _mars_header() -> fits.Header:
    h = fits.Header()
    h["NAXIS"] = 1
    h["NAXIS1"] = 1700
    h.update(MARS_HEADER)
    return h


def _mars_model(pixel_mm: float = 0.015) -> GratingModel:
    """The MARS grism as a GratingModel of mount 'grism'.

    Paper III's header has theta = 0 at CRPIX, i.e. the detector is square to the ray beta_r that
    hits the reference pixel. Put the camera axis on that pixel (axis_pixel = CRPIX - 1, tilt 0),
    so beta_c = beta_r, i.e. deviation = A + beta_r with apex A = alpha = 27 deg (tilt phi = 0).
    Only f/pixel is fixed by CDELT: f = pixel cos(beta_r) / (CDELT t); the pixel pitch is free.
    The index law n(lambda) = n_r + n'_r (lambda - lambda_r) with lambda_r = CRVAL is ours exactly.
    """
    g_per_nm, order, alpha = 4.5e5 * 1e-9, 1, 27.0
    n_r, dn_per_nm, lam_r_nm, cdelt_nm = 1.765, -1.077e6 * 1e-9, 724.52, 0.2956
    sin_a = np.sin(np.radians(alpha))
    beta_r = np.degrees(np.arcsin(order * g_per_nm * lam_r_nm - n_r * sin_a))
    t = order * g_per_nm - dn_per_nm * sin_a
    focal = pixel_mm * np.cos(np.radians(beta_r)) / (cdelt_nm * t)
    return GratingModel(mount="grism", grooves_per_mm=450.0, order=order, grating_angle_deg=0.0,
                        deviation_deg=alpha + float(beta_r), focal_length_mm=float(focal),
                        pixel_mm=pixel_mm, axis_pixel=718.8, n_pixels=1700,
                        prism_apex_deg=alpha, prism_index=n_r, prism_index_slope_per_nm=dn_per_nm,
                        prism_reference_nm=lam_r_nm)


def test_astropy_reproduces_mars_grism_values():
    lam = _wcs_wavelength_nm(_mars_header(), np.array([p for p, _ in MARS_CHECK]) - 1.0) * 10.0
    np.testing.assert_allclose(lam, [a for _, a in MARS_CHECK], rtol=0, atol=5e-4)


@pytest.mark.parametrize("pixel_mm", [0.015, 0.024])
def test_mars_grism_as_grating_model(pixel_mm):
    model = _mars_model(pixel_mm)
    # Published values (fits-wcs-grating.md §1), 3 decimals in Angstrom.
    for fits_pixel, angstrom in MARS_CHECK:
        assert model.wavelength(fits_pixel - 1.0) * 10.0 == pytest.approx(angstrom, abs=5e-4)
    # Every pixel against astropy with the published header itself ...
    x = np.arange(1700, dtype=float)
    np.testing.assert_allclose(model.wavelength(x), _wcs_wavelength_nm(_mars_header(), x),
                               rtol=1e-9, atol=0)
    # ... and our header builder gives back the published keywords.
    h = grating_header(model, ctype="AWAV-GRA")
    for key, value in MARS_HEADER.items():
        if isinstance(value, str):
            assert h[key] == value
        else:
            assert h[key] == pytest.approx(value, rel=1e-12, abs=1e-12), key
    assert h["PV1_5"] == 0.0
    assert h["PV1_6"] == pytest.approx(0.0, abs=1e-12)


def test_wcs_header_pv_units_are_per_metre():
    # fits-wcs-grating.md §5.3: PV1_0 given per mm instead of per metre is silently wrong (up to
    # 12.5 px in the worked example). Our builder must not fall into it: a per-mm PV1_0 disagrees.
    h = grating_header(WORKED)
    x = np.arange(WORKED.n_pixels, dtype=float)
    good = _wcs_wavelength_nm(h, x)
    h["PV1_0"] = WORKED.grooves_per_mm
    bad = _wcs_wavelength_nm(h, x)
    assert np.max(np.abs(bad - good) / WORKED.dispersion(x)) > 1.0
    np.testing.assert_allclose(WORKED.wavelength(x), good, rtol=1e-9, atol=0)


# --------------------------------------------------------------------------------------------
# Internal consistency
# --------------------------------------------------------------------------------------------

DISTORTION = (0.3, 0.5, -0.8, 0.3)  # Legendre coefficients in px, ~1.6 px at the ends


@pytest.mark.parametrize("name", list(VARIANTS))
@pytest.mark.parametrize("direction", [1, -1])
@pytest.mark.parametrize("distortion", [(), DISTORTION])
def test_pixel_wavelength_round_trip(name, direction, distortion):
    model = VARIANTS[name].with_parameters(direction=direction, distortion=distortion)
    x = np.linspace(-0.5, model.n_pixels - 0.5, 1001)
    lam = model.wavelength(x)
    assert np.all(np.isfinite(lam))
    np.testing.assert_allclose(model.pixel(lam), x, rtol=0, atol=1e-6)
    # wavelength -> pixel -> wavelength over the detector's range: exact (closed form) without
    # distortion; with it, pixel() inverts the shift by fixed-point iteration, so the error is
    # measured in pixels with the same 1e-6 px tolerance as above.
    grid = np.linspace(np.min(lam), np.max(lam), 777)
    back = model.wavelength(model.pixel(grid))
    if distortion:
        err_px = np.abs(back - grid) / np.abs(model.dispersion(model.pixel(grid)))
        assert np.max(err_px) < 1e-6
    else:
        np.testing.assert_allclose(back, grid, rtol=1e-12, atol=0)
    # pixels run the stated way: beta rises with x for direction +1
    assert np.sign(np.diff(model.beta(x))).tolist() == [direction] * (x.size - 1)


def test_pixel_with_large_distortion_converges_with_more_iterations():
    # A 5-px distortion: the fixed-point inversion converges to 1e-9 px with 10 iterations.
    model = WORKED.with_parameters(distortion=(1.0, 2.0, -3.0, 1.5))
    x = np.arange(WORKED.n_pixels, dtype=float)
    np.testing.assert_allclose(model.pixel(model.wavelength(x), iterations=10), x, rtol=0, atol=1e-9)


def test_distortion_shifts_pixels_by_its_legendre_value():
    # The distortion is an extra pixel shift sum_k c_k P_k(u), u in [-1, 1] over the detector.
    model = WORKED.with_parameters(distortion=(0.0, 2.0))  # shift 2u: -2 px at x = 0, +2 px at the end
    for x, shift in [(0.0, -2.0), (2047.5, 0.0), (4095.0, 2.0)]:
        assert model.wavelength(x) == pytest.approx(float(WORKED.wavelength(x + shift)), rel=1e-14)


@pytest.mark.parametrize("tilt", [0.0, 3.0, -7.0])
@pytest.mark.parametrize("direction", [1, -1])
@pytest.mark.parametrize("mount", ["reflection", "transmission"])
def test_dispersion_matches_reciprocal_linear_dispersion_at_axis(tilt, direction, mount):
    model = WORKED.with_parameters(mount=mount, tilt_deg=tilt, direction=direction)
    _, beta_c = model.angles
    expected = (direction * np.cos(np.radians(tilt)) * model.pixel_mm
                * reciprocal_linear_dispersion(beta_c, model.grooves_per_mm, model.order,
                                               model.focal_length_mm))
    assert model.dispersion(model.axis_pixel) == pytest.approx(expected, rel=1e-9)


def test_wavelength_from_angles_inverts_diffraction_angle():
    lam = np.linspace(300.0, 1000.0, 50)
    beta = diffraction_angle(lam, 600.0, 2, 17.0)
    np.testing.assert_allclose(wavelength_from_angles(17.0, beta, 600.0, 2), lam, rtol=1e-12)


def test_non_diffractable_wavelengths_are_nan():
    # 1200/mm, m = 1, alpha = 0: sin(beta) = 1.2e-3 * lambda exceeds 1 beyond 833.3 nm.
    beta = diffraction_angle(np.array([500.0, 833.0, 834.0, 2000.0]), 1200.0, 1, 0.0)
    assert np.isfinite(beta[:2]).all()
    assert np.isnan(beta[2:]).all()
    # The worked example (alpha = 35): sin(beta) > 1 for lambda > (1 + sin 35) / 1.2e-3 = 1311.3 nm.
    px = WORKED.pixel(np.array([5506.1014924892015 / 10, 1311.0, 1312.0, 3000.0]))
    assert px[0] == pytest.approx(2047.5, abs=1e-9)
    assert np.isfinite(px[1])  # diffracted, far off the chip (pixel() does no range check)
    assert np.isnan(px[2:]).all()
    # Diffracted but travelling parallel to (or away from) the tilted detector: also NaN.
    grazing = GratingModel(mount="transmission", grooves_per_mm=600.0, order=1, grating_angle_deg=10.0,
                           deviation_deg=85.0, focal_length_mm=100.0, pixel_mm=0.01, axis_pixel=500.0,
                           n_pixels=1000, tilt_deg=10.0)
    assert np.isnan(grazing.pixel(50.0))  # beta = -8.3 deg, 83 deg off an axis at 75 deg
    assert np.isfinite(grazing.pixel(float(grazing.wavelength(500.0))))


def test_mount_angles_for_each_mount():
    # Reflection: fits-wcs-grating.md §2, rotation 20 deg, collimator-camera angle 30 deg -> 35, 5.
    assert mount_angles("reflection", 20.0, 30.0) == pytest.approx((35.0, 5.0))
    alpha, beta_c = mount_angles("reflection", -4.0, 42.0)
    assert alpha - beta_c == pytest.approx(42.0)  # the collimator-camera angle
    assert mount_angles("reflection", 12.0, 0.0) == pytest.approx((12.0, 12.0))  # Littrow
    # Transmission: alpha = phi, beta_c = D - phi. With D = 0 the camera looks along the undeviated
    # beam, where zeroth order (beta = -alpha) goes.
    assert mount_angles("transmission", 7.0, 25.0) == pytest.approx((7.0, 18.0))
    _, beta_c = mount_angles("transmission", 7.0, 0.0)
    assert diffraction_angle(600.0, 300.0, 0, 7.0) == pytest.approx(beta_c)
    # Grism: alpha = A + phi (inside the glass), beta_c = D - A.
    assert mount_angles("grism", 0.5, 3.0, prism_apex_deg=20.0) == pytest.approx((20.5, -17.0))
    # Grism on the undeviated beam (phi = 0, D = 0) with a constant index: the camera axis receives
    # lambda_0 = (n - 1) sin A / (m G), the usual straight-through grism wavelength (from memory).
    grism = GratingModel(mount="grism", grooves_per_mm=300.0, order=1, grating_angle_deg=0.0,
                         deviation_deg=0.0, focal_length_mm=200.0, pixel_mm=0.015, axis_pixel=1023.5,
                         n_pixels=2048, prism_apex_deg=20.0, prism_index=1.52)
    lam0 = (1.52 - 1.0) * np.sin(np.radians(20.0)) / 300e-6
    assert grism.wavelength(1023.5) == pytest.approx(lam0, rel=1e-12)


def test_invalid_mount_raises():
    with pytest.raises(ValueError, match="'echelle'"):
        mount_angles("echelle", 10.0, 20.0)
    model = WORKED.with_parameters(mount="prism")
    with pytest.raises(ValueError, match="mount must be 'reflection', 'transmission' or 'grism'"):
        model.wavelength(100.0)
