"""Tests of :mod:`wavecal.simulate`: synthetic arc frames with a known truth.

Outside checks used here:

* the pixel-integrated line profile against direct numerical integration (scipy.integrate) of
  a top-hat convolved with a Gaussian, and its Gaussian limit against the FWHM = 2 sqrt(2 ln 2)
  sigma relation (standard normal distribution; common practice);
* the noise against the photon-transfer relation: for a linear detector the variance in ADU^2
  of a frame difference is 2 (S/g + RN^2/g^2) for a signal of S ADU above bias (Janesick,
  "Photon Transfer", SPIE Press 2007; from memory);
* the lines against the shipped line list read through :mod:`wavecal.linelists`.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from astropy.io import fits
from scipy import integrate
from scipy.special import ndtr

from wavecal.linelists import load_line_list
from wavecal.profile import load_profile, profile_from_dict
from wavecal.simulate import SimulatedArc, simulate_arc, slit_line_profile
from wavecal.simulate.hydrogen import balmer_wavelengths
from wavecal.simulate.line_profile import LineWidth, blur_for_fwhm, fwhm_of

QUIET = {"cosmic_rays": 0, "hot_pixels": 0, "scattered_light": 0.0}


def _flipped(name: str):
    """An example profile with the dispersion direction reversed."""
    prof = load_profile(name)
    det = dataclasses.replace(prof.detector,
                              wavelength_increases=-prof.detector.wavelength_increases)
    return dataclasses.replace(prof, detector=det)


def _collapse(arc: SimulatedArc) -> np.ndarray:
    """Sum of the half-maximum slit rows, as ADU along the dispersion axis."""
    data = arc.data.astype(float)
    if arc.profile.detector.dispersion_axis == 0:
        data = data.T
    return data[slice(*arc.slit_rows)].sum(axis=0)


def _centroid_errors(arc: SimulatedArc, min_snr: float = 300.0) -> np.ndarray:
    """Centroid minus x_true for bright lines with no other line within 6 FWHM."""
    spec = _collapse(arc)
    lines = arc.lines
    x = lines["x_true"].to_numpy()
    errors = []
    for i, row in lines.iterrows():
        half = int(np.ceil(2.5 * row.fwhm_px))
        c = int(round(row.x_true))
        if row.snr < min_snr or c - half - 10 < 0 or c + half + 10 > len(spec):
            continue
        if np.min(np.abs(np.delete(x, i) - row.x_true), initial=np.inf) < 6 * row.fwhm_px:
            continue
        if not (arc.lines["x_true"].between(0, arc.truth.n_pixels - 1)[i]):
            continue
        background = np.median(np.r_[spec[c - half - 8:c - half], spec[c + half + 1:c + half + 9]])
        window = spec[c - half:c + half + 1] - background
        pixels = np.arange(c - half, c + half + 1)
        errors.append(np.sum(window * pixels) / np.sum(window) - row.x_true)
    return np.array(errors)


# -- the line profile -----------------------------------------------------------------------
@pytest.mark.parametrize(("slit", "sigma"), [(0.0, 0.8), (1.5, 0.6), (2.4, 0.05)])
def test_profile_matches_numerical_integration(slit, sigma):
    # Direct double integral over the pixel and the top-hat of a normal density (scipy).
    def direct(x, centre):
        if slit == 0:
            return integrate.quad(lambda u: np.exp(-0.5 * ((u - centre) / sigma) ** 2)
                                  / (sigma * np.sqrt(2 * np.pi)), x - 0.5, x + 0.5)[0]
        inner = lambda u: (ndtr((u - centre + slit / 2) / sigma)  # noqa: E731
                           - ndtr((u - centre - slit / 2) / sigma)) / slit
        return integrate.quad(inner, x - 0.5, x + 0.5, epsabs=1e-12)[0]

    centre = 10.3
    x = np.arange(4, 17)
    got = slit_line_profile(x, centre, slit_px=slit, blur_sigma_px=sigma)
    want = np.array([direct(xi, centre) for xi in x])
    np.testing.assert_allclose(got, want, atol=1e-9)
    assert got.sum() == pytest.approx(1.0, abs=1e-9)
    assert np.all(got >= 0)


def test_blur_for_fwhm_reaches_half_maximum_at_half_width():
    # Gaussian limit: FWHM = 2 sqrt(2 ln 2) sigma (normal distribution; common practice).
    assert blur_for_fwhm(3.0, 0.0) == pytest.approx(3.0 / (2 * np.sqrt(2 * np.log(2))), rel=1e-8)
    fwhm, slit = 3.0, 1.8
    sigma = blur_for_fwhm(fwhm, slit)
    profile = lambda u: ndtr((u + slit / 2) / sigma) - ndtr((u - slit / 2) / sigma)  # noqa: E731
    assert profile(fwhm / 2) == pytest.approx(0.5 * profile(0.0), rel=1e-8)


def test_profile_rejects_bad_widths():
    with pytest.raises(ValueError, match="blur_sigma_px must be positive"):
        slit_line_profile(0.0, 0.0, slit_px=1.0, blur_sigma_px=0.0)


# -- truth self-consistency -----------------------------------------------------------------
CASES = {
    "reflection, axis 1, +1": (lambda: load_profile("tho_longslit"), {}),
    "reflection, axis 1, -1": (lambda: _flipped("tho_longslit"), {}),
    "reflection, binned 2x2": (lambda: load_profile("tho_longslit"), {"binning": 2}),
    "transmission, axis 0, -1": (lambda: load_profile("tho_transmission"), {}),
    "transmission, axis 0, +1": (lambda: _flipped("tho_transmission"), {}),
    "grism": (lambda: load_profile("tho_grism"), {}),
    "approximate": (lambda: load_profile("tho_approximate"), {}),
}


@pytest.mark.parametrize("case", list(CASES))
def test_lines_land_where_the_truth_says(case):
    make, options = CASES[case]
    prof = make()
    arc = simulate_arc(prof, seed=11, peak_snr=3000.0, **QUIET, **options)
    errors = _centroid_errors(arc)
    assert len(errors) >= 3, "too few bright isolated lines to check"
    assert np.max(np.abs(errors)) < 0.1
    # The truth model maps each first-order line's x_true back to its wavelength.
    first = arc.lines[arc.lines["order"] == arc.truth.order]
    np.testing.assert_allclose(arc.true_wavelength(first["x_true"].to_numpy()),
                               first["wavelength_nm"].to_numpy(), atol=1e-6)
    # Wavelength runs along the profile's direction.
    step = np.diff(arc.true_wavelength(np.array([10.0, arc.truth.n_pixels - 10.0])))[0]
    assert np.sign(step) == prof.detector.wavelength_increases


def test_frame_layout_follows_the_profile():
    prof = load_profile("tho_transmission")
    arc = simulate_arc(prof, seed=2, **QUIET)
    assert arc.data.shape == prof.detector.shape
    assert arc.data.dtype == np.uint16
    binned = simulate_arc(load_profile("tho_longslit"), seed=2, binning=2, **QUIET)
    assert binned.data.shape == (256, 2064)
    assert binned.truth.pixel_mm == pytest.approx(0.030)
    assert binned.profile.binning_from_header(binned.header) == (2, 2)
    with pytest.raises(ValueError, match="maps no header keyword for binning"):
        simulate_arc(prof, seed=2, binning=2)


def test_truth_differs_from_nominal_within_the_priors():
    prof = load_profile("tho_longslit")
    pr = prof.priors
    for seed in range(8):
        arc = simulate_arc(prof, seed=seed, lamps="HgAr", central_wavelength_nm=600.0,
                           cosmic_rays=0, hot_pixels=0)
        t, n = arc.truth, arc.nominal
        assert abs(t.grating_angle_deg - n.grating_angle_deg) <= pr.grating_angle_deg
        assert abs(t.focal_length_mm / n.focal_length_mm - 1) <= pr.focal_length_fraction
        assert abs(t.axis_pixel - n.axis_pixel) <= pr.axis_pixel_px
        assert abs(t.tilt_deg - n.tilt_deg) <= pr.tilt_deg
        assert t != n
        # What the header says leads back to the nominal model.
        assert prof.grating_angle_from_header(arc.header) == pytest.approx(n.grating_angle_deg)
        assert prof.lamps_from_header(arc.header) == ("Hg", "Ar")
        assert prof.header_value(arc.header, "image_type") == "arc"
        assert abs(n.central_wavelength() - 600.0) < 1e-3


def test_explicit_errors_are_applied():
    prof = load_profile("tho_longslit")
    arc = simulate_arc(prof, seed=1, grating_angle_deg=10.0, angle_error_deg=-2.5,
                       focal_error_fraction=0.02, axis_error_px=7.0, tilt_error_deg=0.5,
                       distortion_px=(0.0, 0.0, 0.1), **QUIET)
    assert arc.header["GRTANGLE"] == 10.0
    assert arc.truth.grating_angle_deg == pytest.approx(7.5)
    assert arc.truth.focal_length_mm == pytest.approx(306.0)
    assert arc.truth.axis_pixel == pytest.approx(arc.nominal.axis_pixel + 7.0)
    assert arc.truth.tilt_deg == pytest.approx(0.5)
    assert arc.truth.distortion == (0.0, 0.0, 0.1)


def test_approximate_profile_gets_a_hidden_model_within_the_stated_uncertainty():
    prof = load_profile("tho_approximate")
    approx = prof.approximate
    for seed in range(6):
        truth = simulate_arc(prof, seed=seed, **QUIET).truth
        assert truth.mount == "reflection"
        assert 300 <= truth.grooves_per_mm <= 1200
        centre = truth.central_wavelength()
        dispersion = float(truth.dispersion(0.5 * (truth.n_pixels - 1)))
        # The axis may sit 2 % of the detector off centre: allow that much extra.
        slack = 0.02 * truth.n_pixels * dispersion
        assert abs(centre - approx.central_wavelength_nm) <= (
            approx.central_wavelength_uncertainty * approx.central_wavelength_nm + slack)
        assert abs(dispersion / approx.dispersion_nm_per_px - 1) <= (
            approx.dispersion_uncertainty + 0.02)


# -- the lamp -------------------------------------------------------------------------------
def test_lines_are_the_listed_ones_when_nothing_is_dropped_or_added():
    prof = load_profile("tho_grism")
    arc = simulate_arc(prof, seed=4, lamps="NeAr", missing_fraction=0.0, unlisted_fraction=0.0,
                       ghosts=False, **QUIET)
    lo, hi = np.sort(arc.true_wavelength(np.array([-12.0, arc.truth.n_pixels - 1 + 12.0])))
    listed = load_line_list(("Ne", "Ar")).in_range(lo, hi)
    assert np.array_equal(np.sort(arc.lines["wavelength_nm"].to_numpy()),
                          np.sort(listed.wavelength_nm))
    assert arc.lines["listed"].all()


def test_missing_unlisted_and_intensity_scatter():
    prof = load_profile("tho_grism")
    arc = simulate_arc(prof, seed=9, lamps="HgNeAr", missing_fraction=0.3, unlisted_fraction=0.2,
                       ghosts=False, **QUIET)
    lines = arc.lines
    lo, hi = np.sort(arc.true_wavelength(np.array([-12.0, arc.truth.n_pixels - 1 + 12.0])))
    n_list = len(load_line_list(("Hg", "Ne", "Ar")).in_range(lo, hi))
    n_listed = int(lines["listed"].sum())
    assert 0.45 * n_list < n_listed < 0.9 * n_list  # about 70 % of the list survives
    assert (~lines["listed"]).sum() == round(0.2 * n_listed)
    # Strengths are not proportional to the listed intensities.
    ne = load_line_list(("Ne",))
    sel = lines[lines["listed"] & (lines["element"] == "Ne")]
    listed_intensity = np.interp(sel["wavelength_nm"], ne.wavelength_nm, ne.intensity)
    log_ratio = np.log(sel["flux_e"].to_numpy() / listed_intensity)
    assert np.std(log_ratio) > 0.3


def test_ghosts_are_next_order_images_of_ultraviolet_lines():
    prof = load_profile("tho_longslit")
    arc = simulate_arc(prof, seed=3, lamps="Hg", central_wavelength_nm=540.0,
                       missing_fraction=0.0, **QUIET)
    ghosts = arc.lines[arc.lines["ghost"]]
    # Hg 253.6521 nm (NIST ASD, air; as shipped in line_lists/Hg.ecsv) in order 2 lands where
    # 507.3042 nm falls in order 1 (grating equation: m * lambda is what matters)
    g = ghosts[np.isclose(ghosts["wavelength_nm"], 253.6521, atol=1e-4)]
    assert len(g) == 1 and int(g["order"].iloc[0]) == 2
    assert g["x_true"].iloc[0] == pytest.approx(float(arc.truth.pixel(2 * g["wavelength_nm"].iloc[0])),
                                                abs=1e-6)
    first = arc.lines[~arc.lines["ghost"] & arc.lines["listed"]]
    assert (ghosts["wavelength_nm"] < first["wavelength_nm"].min()).all()
    none = simulate_arc(prof, seed=3, lamps="Hg", central_wavelength_nm=540.0, ghosts=False,
                        **QUIET)
    assert not none.lines["ghost"].any()


# -- detector effects -----------------------------------------------------------------------
def test_read_noise_and_bias_in_unlit_rows():
    prof = load_profile("tho_grism")
    det = prof.detector
    arc = simulate_arc(prof, seed=5, dtype="float32", **QUIET)
    rows = np.r_[0:arc.slit_rows[0] - 10, arc.slit_rows[1] + 10:arc.data.shape[0]]
    dark = arc.data[rows].astype(float)
    assert dark.size > 10000
    assert np.mean(dark) == pytest.approx(det.bias_adu, abs=0.05)
    assert np.std(dark) == pytest.approx(det.read_noise_e / det.gain_e_per_adu, rel=0.03)


def test_photon_transfer_gives_the_profile_gain():
    prof = load_profile("tho_grism")
    det = prof.detector
    options = dict(seed=6, lamps="HgNeAr", dtype="float32", peak_snr=1500.0, scattered_light=0.05,
                   cosmic_rays=0, hot_pixels=0)
    a = simulate_arc(prof, noise_seed=100, **options)
    b = simulate_arc(prof, noise_seed=200, **options)
    assert np.array_equal(a.lines["flux_e"], b.lines["flux_e"])
    signal = 0.5 * (a.data + b.data).astype(float) - det.bias_adu
    half_diff_var = 0.5 * (a.data.astype(float) - b.data) ** 2
    lit = signal > 50
    # Variance of the frame difference / 2 = S/g + (RN/g)^2  (photon transfer; see docstring).
    read_var = (det.read_noise_e / det.gain_e_per_adu) ** 2
    slope, _ = np.polyfit(signal[lit], half_diff_var[lit] - read_var, 1)
    assert slope == pytest.approx(1.0 / det.gain_e_per_adu, rel=0.05)


def test_saturation_clips_the_brightest_lines():
    prof = load_profile("tho_longslit")
    arc = simulate_arc(prof, seed=8, saturate=2, **QUIET)
    sat = arc.lines[arc.lines["saturated"]]
    assert len(sat) >= 2
    assert arc.data.max() == prof.detector.saturation_adu
    data = arc.data[slice(*arc.slit_rows)]
    for x in np.round(sat["x_true"].to_numpy()).astype(int):
        assert data[:, x].max() == prof.detector.saturation_adu
    clean = simulate_arc(prof, seed=8, **QUIET)
    assert not clean.lines["saturated"].any()
    assert clean.data.max() < prof.detector.saturation_adu


def test_cosmic_rays_and_hot_pixels_add_outliers_outside_the_overscan():
    prof = load_profile("tho_longslit")
    det = prof.detector
    sigma_adu = det.read_noise_e / det.gain_e_per_adu

    def outliers(arc):
        rows = np.r_[0:arc.slit_rows[0] - 10, arc.slit_rows[1] + 10:arc.data.shape[0]]
        dark = arc.data[rows, :4096].astype(float)
        level = np.median(dark)
        over = arc.data[:, det.overscan[2]:det.overscan[3]].astype(float)
        return (dark > level + 15 * sigma_adu).sum(), (over > level + 15 * sigma_adu).sum()

    assert outliers(simulate_arc(prof, seed=12, **QUIET)) == (0, 0)
    in_dark, in_overscan = outliers(simulate_arc(prof, seed=12, cosmic_rays=60, hot_pixels=60,
                                                 scattered_light=0.0))
    assert in_dark >= 10
    assert in_overscan == 0


# -- reproducibility, files, options --------------------------------------------------------
def test_same_seed_same_frame_other_seed_other_frame():
    prof = load_profile("tho_transmission")
    a = simulate_arc(prof, seed=21)
    b = simulate_arc(prof, seed=21)
    c = simulate_arc(prof, seed=22)
    assert np.array_equal(a.data, b.data)
    assert a.lines.equals(b.lines)
    assert a.truth == b.truth
    assert not np.array_equal(a.data, c.data)
    assert a.truth != c.truth


def test_write_round_trip(tmp_path):
    prof = load_profile("tho_longslit")
    arc = simulate_arc(prof, seed=1, binning=2)
    path = arc.write(tmp_path / "arc.fits")
    with fits.open(path) as hdul:
        assert np.array_equal(hdul[0].data, arc.data)
        assert hdul[0].data.dtype == np.uint16
        assert hdul[0].header["ARCLAMPS"] == arc.header["ARCLAMPS"]
        assert hdul[0].header["DATE-OBS"] == arc.header["DATE-OBS"]
    with pytest.raises(FileExistsError, match="arc.fits"):
        arc.write(path)
    arc.write(path, overwrite=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["arc.fits"]


def test_image_goes_to_the_profiles_extension():
    prof = load_profile("tho_grism")
    prof = dataclasses.replace(prof, detector=dataclasses.replace(prof.detector, hdu="SCI"))
    hdul = simulate_arc(prof, seed=1, **QUIET).to_hdulist()
    assert hdul[0].data is None
    assert hdul["SCI"].data.shape == prof.detector.shape


@pytest.mark.parametrize(("option", "message"), [
    ({"peak_snr": 0.0}, "peak_snr must be positive"),
    ({"missing_fraction": 1.0}, r"missing_fraction must be in \[0, 1\)"),
    ({"dtype": "int32"}, "dtype must be"),
    ({"binning": 3}, "binning must be 1 or 2"),
    ({"slit_fraction": 1.0}, "slit_fraction must be in"),
    ({"central_wavelength_nm": 5000.0}, "no grating angle puts 5000.0 nm"),
])
def test_bad_options_are_refused(option, message):
    with pytest.raises(ValueError, match=message):
        simulate_arc(load_profile("tho_longslit"), seed=0, **option)


# -- the physics of real spectrographs (issues 12 and 13) ------------------------------------
def _tall_profile(n_rows: int = 600, n_disp: int = 1024, grooves: float = 600.0,
                  focal_mm: float = 120.0):
    """A small invented reflection spectrograph with a tall slit (Tamsin Hill style)."""
    return profile_from_dict({
        "instrument": {"name": "THO test tall slit", "medium": "air", "lamps": ["Ne"]},
        "grating": {"mount": "reflection", "grooves_per_mm": grooves, "deviation_deg": 30.0},
        "camera": {"focal_length_mm": focal_mm},
        "detector": {"pixel_size_um": 13.5, "shape": [n_rows, n_disp], "dispersion_axis": 1,
                     "wavelength_increases": 1, "saturation_adu": 65000.0,
                     "gain_e_per_adu": 1.0, "read_noise_e": 3.0, "bias_adu": 300.0},
        "header": {"grating_angle": {"keyword": "GRTANGLE"}, "lamps": {"keyword": "ARCLAMPS"}},
    })


def _row_centroids(arc: SimulatedArc, x: float, rows: np.ndarray, half: int = 6) -> np.ndarray:
    """Centroid of the line near ``x`` on each of ``rows`` (frames with no scattered light)."""
    data = arc.data.astype(float) - arc.profile.detector.bias_adu
    out = []
    for y in rows:
        c = int(round(x + arc.true_shift(x, y)))
        window = data[y, c - half:c + half + 1]
        out.append(np.sum(window * np.arange(c - half, c + half + 1)) / np.sum(window))
    return np.array(out)


# peak_snr 5000 keeps the brightest line of the tall-slit frames at about 55 000 of the 65 000 ADU
# the detector holds: bright enough for per-row centroids to ~0.01 px, below the clipping that
# biases them (see _isolated_bright_line).
CLEAN = {"cosmic_rays": 0, "hot_pixels": 0, "scattered_light": 0.0, "peak_snr": 5000.0,
             "dtype": "float32", "missing_fraction": 0.0, "unlisted_fraction": 0.0,
             "ghosts": False}


def _isolated_bright_line(arc: SimulatedArc, *, min_distance: float = 0.0) -> float:
    """Brightest line with no other line within 25 px, at least ``min_distance`` px from the
    detector centre along the dispersion and not saturated: the centroid of a clipped, flat-topped
    line moves with the line's pixel phase (by up to 0.08 px for seed 3 at peak_snr 3e4)."""
    lines = arc.lines
    x = lines["x_true"].to_numpy()
    gap = np.array([np.min(np.abs(np.delete(x, i) - v), initial=np.inf) for i, v in enumerate(x)])
    centre = 0.5 * (arc.truth.n_pixels - 1)
    good = ((gap > 25) & (x > 60) & (x < arc.truth.n_pixels - 60)
            & (np.abs(x - centre) >= min_distance) & ~lines["saturated"].to_numpy())
    assert good.any(), "no isolated unsaturated line to measure"
    return float(x[good][np.argmax(lines["flux_e"].to_numpy()[good])])


@pytest.mark.parametrize("rotation", [1.0, -0.7])
def test_detector_rotation_tilts_the_measured_line_by_the_rotation(rotation):
    # A rotated detector turns the slit image (straight along the focal plane's spatial axis)
    # by the rotation angle (plane rotation; common practice).
    arc = simulate_arc(_tall_profile(), seed=3, detector_rotation_deg=rotation, **CLEAN)
    x = _isolated_bright_line(arc)
    rows = np.arange(arc.slit_rows[0] + 20, arc.slit_rows[1] - 20, 10)
    centres = _row_centroids(arc, x, rows)
    slope = np.polyfit(rows, centres, 1)[0]
    assert np.degrees(np.arctan(slope)) == pytest.approx(rotation, abs=0.02)
    # Along the measured line image the true wavelength stays that of the line.
    line = arc.true_wavelength(x)
    dispersion = abs(float(arc.truth.dispersion(x)))
    assert np.max(np.abs(arc.true_wavelength(centres, rows) - line)) / dispersion < 0.05


@pytest.mark.parametrize("geometry", [
    {"detector_rotation_deg": 1.0}, {"detector_rotation_deg": -0.7},
    {"radial_distortion_px": 2.5}, {"slit_smile": True},
    {"detector_rotation_deg": 1.0, "radial_distortion_px": 2.5, "slit_smile": True},
])
def test_camera_geometry_frames_follow_the_truth_far_from_the_centre(geometry):
    # The rendered image and CameraGeometry's truth must agree where the geometry matters most:
    # a line over 400 px from the rotation centre (a cos(theta) scale error about the centre
    # would put it (1 - cos 1 deg) * 436 px = 0.07 px off there, and nothing near the centre).
    arc = simulate_arc(_tall_profile(), seed=3, **geometry, **CLEAN)
    x = _isolated_bright_line(arc, min_distance=400.0)
    rows = np.arange(arc.slit_rows[0] + 20, arc.slit_rows[1] - 20, 10)
    centres = _row_centroids(arc, x, rows)
    dispersion = abs(float(arc.truth.dispersion(x)))
    along = (arc.true_wavelength(centres, rows) - arc.true_wavelength(x)) / dispersion
    assert np.max(np.abs(along)) < 0.05
    # The line image bends or tilts by several times that tolerance (0.45 px for the radial
    # distortion alone, the least): the geometry is there to be seen.
    assert np.ptp(centres) > 0.3


def test_smile_bends_lines_as_the_conical_grating_equation_says():
    # Off the dispersion plane by gamma the grating equation is m lambda = d cos(gamma)
    # (sin alpha + sin beta) (Palmer & Loewen, Diffraction Grating Handbook, ch. 2, conical
    # diffraction; from memory): on a row h pixels from the slit centre the line lambda sits
    # where lambda / cos(gamma) sits on the centre row, gamma = atan(h * pixel / f).
    prof = _tall_profile(n_rows=1000, focal_mm=80.0)
    arc = simulate_arc(prof, seed=5, slit_smile=True, **CLEAN)
    x = _isolated_bright_line(arc)
    wl = float(arc.true_wavelength(x))
    centre = arc.line_shape.reference_row
    rows = np.array([arc.slit_rows[0] + 5, int(round(centre)), arc.slit_rows[1] - 6])
    gamma = np.arctan((rows - centre) * 13.5e-3 / arc.truth.focal_length_mm)
    expected = arc.truth.pixel(wl / np.cos(gamma))
    measured = _row_centroids(arc, x, rows)
    assert expected[0] - expected[1] > 1.0  # the effect is large enough to be seen
    np.testing.assert_allclose(measured, expected, atol=0.03)


def test_radial_distortion_moves_lines_by_the_cube_of_their_distance_from_the_axis():
    # Third-order radial distortion: r -> r (1 + k r^3 / r) (common practice); on the axis row
    # a line moves along the dispersion by k (u - x0)^3, the given displacement at the far end.
    arc = simulate_arc(_tall_profile(), seed=4, radial_distortion_px=2.5, **CLEAN)
    lines = arc.lines[arc.lines["order"] == 1]
    u = arc.truth.pixel(lines["wavelength_nm"].to_numpy())
    axis = arc.truth.axis_pixel
    reach = max(axis, arc.truth.n_pixels - 1 - axis)
    np.testing.assert_allclose(lines["x_true"].to_numpy() - u, 2.5 * ((u - axis) / reach) ** 3,
                               atol=1e-6)
    # The camera mapping and its inverse agree.
    geometry = arc.line_shape
    uu, ww = np.meshgrid(np.linspace(0, 1023, 7), np.linspace(0, 599, 5))
    back = geometry.focal_position(*geometry.detector_position(uu, ww))
    np.testing.assert_allclose(back, (uu, ww), atol=1e-8)


def test_balmer_wavelengths_match_nist():
    # NIST ASD H I, standard air: H-alpha 656.279 nm (blend; reference-values.md, ASD556);
    # H-beta 486.135, H-gamma 434.047, H-delta 410.174 nm (NIST ASD; from memory). The Rydberg
    # formula leaves out fine structure (about 0.01 nm); without the reduced mass the lines
    # would be 0.2-0.4 nm off.
    nist = np.array([656.279, 486.135, 434.047, 410.174])
    np.testing.assert_allclose(balmer_wavelengths([3, 4, 5, 6]), nist, atol=0.012)
    # H-alpha in vacuum: 656.4603 nm for the NIST blend (reference-values.md, section 2).
    assert balmer_wavelengths(3, medium="vacuum") == pytest.approx(656.4603, abs=0.012)


def test_balmer_and_ion_lines_are_unlisted_lines_where_the_truth_says():
    prof = _tall_profile(n_rows=100, grooves=300.0)
    arc = simulate_arc(prof, seed=6, lamps="NeAr", central_wavelength_nm=520.0, balmer=1.0,
                       ion_lines=1.0, **CLEAN)
    lines = arc.lines
    hydrogen = lines[lines["element"] == "H"]
    ions = lines[lines["element"] == "Ar II"]
    assert len(hydrogen) >= 2 and len(ions) >= 5
    assert not (hydrogen["listed"].any() or ions["listed"].any())
    for group in (hydrogen, ions):
        np.testing.assert_allclose(arc.true_wavelength(group["x_true"].to_numpy()),
                                   group["wavelength_nm"].to_numpy(), atol=1e-6)
    # The lines follow the case-B decrement: H-beta / H-alpha = 1 / 2.86 (Osterbrock &
    # Ferland 2006, table 4.2; from memory), and H-alpha has the given fraction of the
    # strongest listed line (no blaze in this profile).
    flux = dict(zip(np.round(hydrogen["wavelength_nm"], 1), hydrogen["flux_e"], strict=True))
    assert flux[486.1] / flux[656.3] == pytest.approx(1 / 2.86, rel=1e-9)
    strongest = lines.loc[lines["listed"] & (lines["order"] == 1), "flux_e"].max()
    assert flux[656.3] <= strongest * (1 + 1e-9)


def test_unfiltered_orders_land_where_the_grating_equation_puts_them():
    # m lambda = d (sin alpha + sin beta) (Palmer & Loewen, ch. 2): the order-m image of lambda
    # falls where the first order has m lambda.
    prof = _tall_profile(n_rows=100, grooves=300.0)
    arc = simulate_arc(prof, seed=7, lamps="HgNeAr", central_wavelength_nm=800.0,
                       unfiltered_orders=(2, 3), **CLEAN)
    lines = arc.lines
    for m in (2, 3):
        images = lines[lines["order"] == m]
        assert len(images) >= 2 and images["ghost"].all()
        x = images["x_true"].to_numpy()
        alpha, _ = arc.truth.angles
        sin_sum = np.sin(np.radians(alpha)) + np.sin(np.radians(arc.truth.beta(x)))
        d_nm = 1e6 / arc.truth.grooves_per_mm
        np.testing.assert_allclose(d_nm * sin_sum / m, images["wavelength_nm"].to_numpy(),
                                   atol=1e-6)
    second, third = (lines.loc[lines["order"] == m, "flux_e"].sum() for m in (2, 3))
    assert third < second < lines.loc[lines["order"] == 1, "flux_e"].sum()


def test_saturation_clips_at_the_level_and_widens_with_the_excess():
    prof = _tall_profile(n_rows=100)
    level = prof.detector.saturation_adu
    runs = []
    for boost in ((1.3, 1.4), (5.8, 6.0)):
        arc = simulate_arc(prof, seed=8, saturate=2, saturation_boost=boost,
                           **(CLEAN | {"peak_snr": 300.0}))
        assert arc.data.max() == level  # float32 frames are clipped at the level too
        top = arc.lines.nlargest(2, "flux_e")
        assert top["saturated"].all()
        row = arc.data[int(round(arc.line_shape.reference_row))]
        runs.append([int(np.sum(row[int(x) - 15:int(x) + 16] >= level)) for x in top["x_true"]])
    # A line 6x over the level is clipped over a wider core than one 1.3x over it (the same
    # lines, the same profile: only the excess differs).
    assert all(r > 0 for r in runs[0])
    assert all(wide > narrow for wide, narrow in zip(runs[1], runs[0], strict=True))


def test_line_width_follows_focus_slope_and_anamorphic_magnification():
    # The image of a slit is cos(alpha)/cos(beta) times wider along the dispersion (anamorphic
    # magnification; Palmer & Loewen, Diffraction Grating Handbook, ch. 2).
    prof = _tall_profile(n_rows=100, grooves=1800.0, focal_mm=60.0)
    arc = simulate_arc(prof, seed=9, central_wavelength_nm=600.0, fwhm_px=4.0, focus_variation=0.0,
                       fwhm_slope=0.2, slit_fraction=0.6, **CLEAN)
    lines = arc.lines
    half = 0.5 * (arc.truth.n_pixels - 1)
    s = (lines["x_true"].to_numpy() - half) / half
    np.testing.assert_allclose(lines["fwhm_px"].to_numpy(), 4.0 * (1 + 0.2 * s), rtol=1e-9)
    width = LineWidth(fwhm=4.0, slit_fraction=0.6, focus=0.0, anamorphic=arc.truth)
    x = np.array([0.0, half, arc.truth.n_pixels - 1.0])
    fwhm, slit, sigma = width.at(x, arc.truth.n_pixels)
    _, beta_c = arc.truth.angles
    expected = np.cos(np.radians(beta_c)) / np.cos(np.radians(arc.truth.beta(x)))
    np.testing.assert_allclose(slit / slit[1], expected / expected[1], rtol=1e-12)
    assert abs(expected[0] - expected[2]) > 0.03  # the effect is large enough to be seen
    np.testing.assert_allclose(fwhm, fwhm_of(slit, sigma))
    np.testing.assert_allclose(fwhm_of(2.4, blur_for_fwhm(4.0, 2.4)), 4.0, rtol=1e-9)


def test_single_row_frames_put_lines_where_the_truth_says():
    prof = _tall_profile(n_rows=1)
    arc = simulate_arc(prof, seed=10, peak_snr=3000.0, **QUIET)
    assert arc.data.shape == (1, 1024) and arc.slit_rows == (0, 1)
    errors = _centroid_errors(arc)
    assert len(errors) >= 3 and np.max(np.abs(errors)) < 0.1


@pytest.mark.parametrize(("option", "message"), [
    ({"detector_rotation_deg": 1.0, "line_tilt_deg": 1.0}, "cannot be combined"),
    ({"saturation_boost": (3.0, 2.0)}, "saturation_boost must be"),
    ({"balmer": -1.0}, "must be non-negative"),
    ({"unfiltered_orders": (4,)}, "unfiltered orders must be among"),
])
def test_bad_physics_options_are_refused(option, message):
    with pytest.raises(ValueError, match=message):
        simulate_arc(load_profile("tho_longslit"), seed=0, **option)
