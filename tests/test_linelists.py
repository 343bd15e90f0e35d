"""Tests of the shipped line lists (line_lists/*.ecsv) and wavecal.linelists."""
from __future__ import annotations

import dataclasses
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from scipy import constants

from wavecal import airvac, linelists
from wavecal.linelists import LineList, available_elements, load_line_list

PM = 1e-3  # one picometre in nm
ELEMENTS = ("Ar", "Cd", "H", "He", "Hg", "Kr", "Na", "Ne", "Xe", "Zn")
LIST_DIR = Path(__file__).resolve().parents[1] / "line_lists"

# Lines per element in this compilation (2026): regression guard for the shipped files.
COUNTS = {"Ar": 84, "Cd": 4, "H": 6, "He": 16, "Hg": 27, "Kr": 29, "Na": 10, "Ne": 89, "Xe": 19,
          "Zn": 1}
# Elements whose files list unresolved fine-structure blends (flagged blend without a listed
# neighbour): He I triplets, Na I 568.82 / 819.48, every H I Balmer line (common practice).
FINE_STRUCTURE = ("H", "He", "Na")


def _table(element: str) -> Table:
    return Table.read(LIST_DIR / f"{element}.ecsv", format="ascii.ecsv")


def test_available_elements() -> None:
    assert available_elements() == ELEMENTS


@pytest.mark.parametrize("element", ELEMENTS)
def test_ecsv_file_columns_units_metadata(element: str) -> None:
    table = _table(element)
    for name in ("wavelength", "intensity", "spectrum", "blend", "weak", "verified", "source",
                 "note"):
        assert name in table.colnames, name
    assert str(table["wavelength"].unit) == "nm"
    assert table["wavelength"].dtype == np.float64
    for flag in ("blend", "weak", "verified"):
        assert table[flag].dtype == bool, flag
    assert table.meta["element"] == element
    assert table.meta["medium"] == "air"
    assert table.meta["unit"] == "nm"
    assert "NIST Atomic Spectra Database" in table.meta["description"]
    for key in ("intensity_scale", "blend_rule", "weak_rule", "vacuum_conversion", "references",
                "lines_from_memory_nm"):
        assert key in table.meta, key
    assert "not comparable between elements" in table.meta["intensity_scale"].lower()
    assert np.all(np.diff(np.asarray(table["wavelength"])) > 0)
    assert len(table) == COUNTS[element]


@pytest.mark.parametrize("element", ELEMENTS)
def test_no_unverified_line_ships(element: str) -> None:
    table = _table(element)
    assert np.all(table["verified"])
    assert list(table.meta["lines_from_memory_nm"]) == []
    assert "from memory" not in {str(source).lower() for source in table["source"]}
    assert load_line_list(element).verified.all()


@pytest.mark.parametrize("element", ELEMENTS)
def test_every_line_names_a_source_listed_in_the_references(element: str) -> None:
    table = _table(element)
    references = table.meta["references"]
    assert all(str(text).strip() for text in references.values())
    for wavelength, source in zip(table["wavelength"], table["source"]):
        assert str(source) in references, (wavelength, source)


@pytest.mark.parametrize("element", ELEMENTS)
def test_spectrum_column_names_the_element_and_stage(element: str) -> None:
    table = _table(element)
    spectra = {str(value) for value in table["spectrum"]}
    assert spectra <= {f"{element} I", f"{element} II"}
    assert spectra == {part.strip() for part in table.meta["spectrum"].split(",")}
    lines = load_line_list(element)
    np.testing.assert_array_equal(lines.spectrum, np.asarray(table["spectrum"], dtype=str))


@pytest.mark.parametrize("element", ELEMENTS)
def test_intensities_positive_and_finite(element: str) -> None:
    lines = load_line_list(element)
    assert np.all(np.isfinite(lines.intensity)) and np.all(lines.intensity > 0)


@pytest.mark.parametrize("element", ELEMENTS)
def test_weak_flag_follows_its_rule(element: str) -> None:
    # weak_rule in every file: intensity below 1 % of the strongest listed line in 350-1100 nm.
    lines = load_line_list(element)
    in_range = (lines.wavelength_nm >= 350) & (lines.wavelength_nm <= 1100)
    expected = lines.intensity < 0.01 * lines.intensity[in_range].max()
    np.testing.assert_array_equal(lines.weak, expected)


@pytest.mark.parametrize("element", ELEMENTS)
def test_every_element_loads(element: str) -> None:
    lines = load_line_list(element)
    assert len(lines) == COUNTS[element]
    assert lines.medium == "air"
    assert set(lines.element) == {element}
    assert np.all(np.diff(lines.wavelength_nm) > 0)


# (element, air wavelength nm): values checked in the project's reference notes
# (reference-values.md section 1). Source per value: NIST ASD v5.5.6 (ASD556 copy) unless noted;
# "ArLev" = NIST ASD Ar I lines, Ritz-checked from the NIST levels; "SBS04" = Sansonetti,
# Blackwell & Saloman 2004, J. Res. NIST 109, 371.
NIST_VALUES = [
    ("Hg", 404.6565), ("Hg", 435.8335), ("Hg", 546.0750), ("Hg", 576.9610), ("Hg", 579.0670),
    ("Ne", 585.24878), ("Ne", 640.22480), ("Ne", 692.94672),
    ("Ne", 849.53595),  # SBS04
    ("Ne", 865.43828),  # SBS04
    ("Ar", 696.5431),
    ("Ar", 763.5106),   # ArLev
    ("Ar", 811.5311),   # ArLev
    ("Ar", 912.2967),   # ArLev
    ("Ar", 451.0733), ("Kr", 557.028944), ("Kr", 587.091599), ("Xe", 467.12258),
    ("He", 587.5621), ("He", 667.8151), ("Cd", 479.99123), ("Cd", 643.84695), ("Zn", 636.2348),
    ("Na", 588.995095), ("Na", 589.592424),
]


@pytest.mark.parametrize(("element", "wavelength"), NIST_VALUES)
def test_nist_values_present_and_verified(element: str, wavelength: float) -> None:
    lines = load_line_list(element)
    i = int(np.argmin(np.abs(lines.wavelength_nm - wavelength)))
    assert lines.wavelength_nm[i] == pytest.approx(wavelength, abs=1e-7)
    assert lines.verified[i]


@pytest.mark.parametrize(("element", "wavelength", "tolerance_pm"), [
    # Encyclopaedia Britannica "D-lines": D2 5889.950 Å, D1 5895.924 Å. One unit of the printed
    # last digit: NIST's D2 (5889.95095 Å) is 0.00095 Å from the printed value (truncated?).
    ("Na", 588.9950, 0.1),
    ("Na", 589.5924, 0.1),
    ("Hg", 546.074, 1.5),    # RP Photonics "Standard Spectral Lines", e-line (glass convention)
    ("He", 587.5618, 0.5),   # RP Photonics "Standard Spectral Lines", d-line
    ("Cd", 643.8469, 0.1),   # RP Photonics "Standard Spectral Lines", C'-line
    ("Cd", 479.9914, 0.5),   # RP Photonics "Standard Spectral Lines", F'-line
])
def test_lines_agree_with_independent_tables(element: str, wavelength: float,
                                             tolerance_pm: float) -> None:
    # Tolerances cover the printed precision and the documented pencil-lamp vs glass-convention
    # differences (reference notes §1.10 / §5).
    lines = load_line_list(element)
    assert np.min(np.abs(lines.wavelength_nm - wavelength)) <= tolerance_pm * PM


def test_krypton_standard_consistent_with_the_metre_definition() -> None:
    # 1960 definition of the metre: 1 m = 1 650 763.73 vacuum wavelengths of the Kr-86 line.
    vacuum = 1e9 / 1650763.73
    lines = load_line_list("Kr", medium="vacuum", airvac_method="peck_reeder1972")
    assert np.min(np.abs(lines.wavelength_nm - vacuum)) <= 0.05 * PM


def test_neon_vacuum_value_published_by_sansonetti() -> None:
    # Sansonetti et al. 2004 (Peck & Reeder 1972 conversion): 8495.3595 Å air -> 8497.6937 Å vac.
    lines = load_line_list("Ne", medium="vacuum", airvac_method="peck_reeder1972",
                           wavelength_range_nm=(849.7, 849.8))
    assert len(lines) == 1
    assert lines.wavelength_nm[0] == pytest.approx(849.76937, abs=1e-5)


def test_sansonetti_intensity_ratios_kept() -> None:
    # Sansonetti et al. 2004 relative intensities: 849.53595 nm I=69000, 865.43828 nm I=64000,
    # 876.7536 nm I=160.
    lines = load_line_list("Ne", wavelength_range_nm=(849.0, 877.0))
    def intensity(w: float) -> float:
        return float(lines.intensity[np.argmin(np.abs(lines.wavelength_nm - w))])
    assert intensity(849.53595) / intensity(865.43828) == pytest.approx(69000 / 64000, rel=1e-3)
    assert intensity(849.53595) / intensity(876.7536) == pytest.approx(69000 / 160, rel=1e-2)


@pytest.mark.parametrize("element", ELEMENTS)
def test_blend_flag_follows_its_rule(element: str) -> None:
    # blend_rule: another listed line of the element (any spectrum) within 0.15 nm, or an
    # unresolved fine-structure blend (then the note says so).
    table = _table(element)
    w = np.asarray(table["wavelength"])
    blend = np.asarray(table["blend"])
    separation = np.abs(w[:, None] - w[None, :]) + np.diag(np.full(len(w), np.inf))
    close = separation.min(axis=1) <= 0.15 if len(w) > 1 else np.zeros(len(w), bool)
    assert np.all(blend[close])
    for i in np.flatnonzero(blend & ~close):
        assert element in FINE_STRUCTURE, w[i]
        assert "fine-structure" in str(table["note"][i]), w[i]


def test_documented_blends_and_weak_lines() -> None:
    ar = load_line_list("Ar", wavelength_range_nm=(772.0, 773.0))
    # 772.3761 / 772.4207 nm: 0.045 nm apart (NIST ASD Ar I levels via the reference notes)
    np.testing.assert_allclose(ar.wavelength_nm, [772.3761, 772.4207])
    assert ar.blend.all()
    na = load_line_list("Na", wavelength_range_nm=(588.0, 590.0))
    assert len(na) == 2 and not na.blend.any()  # Na D lines are 0.6 nm apart
    he = load_line_list("He", wavelength_range_nm=(587.0, 588.0))
    assert he.blend.all()  # He I 587.5621: fine-structure blend (NIST ASD lists components)
    hg = load_line_list("Hg", wavelength_range_nm=(410.0, 411.0))
    assert hg.weak.all()  # Hg 410.8054, class W in the reference notes


def test_exclude_weak() -> None:
    everything = load_line_list(["Ne", "Ar"])
    strong = load_line_list(["Ne", "Ar"], include_weak=False)
    assert len(strong) == len(everything) - int(everything.weak.sum())
    assert not strong.weak.any()


def test_merge_sorted_case_insensitive_and_deduplicated() -> None:
    merged = load_line_list(["hg", "AR", "Hg"])
    assert len(merged) == COUNTS["Hg"] + COUNTS["Ar"]
    assert np.all(np.diff(merged.wavelength_nm) >= 0)
    assert set(merged.element) == {"Hg", "Ar"}
    hg = load_line_list("Hg")
    np.testing.assert_array_equal(merged.wavelength_nm[merged.element == "Hg"], hg.wavelength_nm)
    np.testing.assert_array_equal(merged.intensity[merged.element == "Hg"], hg.intensity)
    np.testing.assert_array_equal(merged.spectrum[merged.element == "Hg"], hg.spectrum)


def test_unknown_element_names_the_available_ones() -> None:
    with pytest.raises(ValueError, match="'Fe'.*available: Ar, Cd, H, He, Hg, Kr, Na, Ne, Xe, Zn"):
        load_line_list(["Ne", "Fe"])
    with pytest.raises(ValueError, match="no element given"):
        load_line_list([])


def test_bad_medium_and_method() -> None:
    with pytest.raises(ValueError, match="medium must be one of"):
        load_line_list("Ne", medium="glass")
    with pytest.raises(ValueError, match="method must be one of"):
        load_line_list("Ne", airvac_method="morton2000")


@pytest.mark.parametrize("method", airvac.AIRVAC_METHODS)
def test_vacuum_medium_uses_airvac(method: str) -> None:
    air = load_line_list(["Hg", "Ne", "Zn"])
    vacuum = load_line_list(["Hg", "Ne", "Zn"], medium="vacuum", airvac_method=method)
    assert vacuum.medium == "vacuum"
    np.testing.assert_array_equal(vacuum.wavelength_nm,
                                  airvac.air_to_vacuum(air.wavelength_nm, method=method))
    np.testing.assert_array_equal(vacuum.element, air.element)
    np.testing.assert_array_equal(air.to_vacuum(method=method).wavelength_nm, vacuum.wavelength_nm)
    np.testing.assert_allclose(vacuum.to_air(method=method).wavelength_nm, air.wavelength_nm,
                               rtol=1e-15, atol=0)
    assert air.to_air() is air and vacuum.to_vacuum() is vacuum


def test_range_applies_in_the_requested_medium() -> None:
    # Ar 811.5311 nm in air is 811.7542 nm in vacuum (NIST ASD value; vacuum via the notes §1.3)
    vacuum = load_line_list("Ar", medium="vacuum", wavelength_range_nm=(811.7, 811.8))
    assert len(vacuum) == 1
    assert vacuum.wavelength_nm[0] == pytest.approx(811.7542, abs=0.1 * PM)
    assert len(load_line_list("Ar", wavelength_range_nm=(811.7, 811.8))) == 0


def test_in_range_is_inclusive_and_validated() -> None:
    lines = load_line_list("Hg")
    picked = lines.in_range(546.0750, 579.0670)
    np.testing.assert_allclose(picked.wavelength_nm[[0, -1]], [546.0750, 579.0670])
    assert picked.medium == "air"
    with pytest.raises(ValueError, match="lo_nm < hi_nm"):
        lines.in_range(600.0, 500.0)
    with pytest.raises(ValueError, match="lo_nm < hi_nm"):
        load_line_list("Hg", wavelength_range_nm=(500.0, np.nan))


def test_to_dataframe() -> None:
    lines = load_line_list(["Cd", "Zn"], medium="vacuum")
    frame = lines.to_dataframe()
    assert list(frame.columns) == ["wavelength_nm", "intensity", "element", "blend", "weak",
                                   "verified", "spectrum"]
    assert len(frame) == len(lines) == COUNTS["Cd"] + COUNTS["Zn"]
    assert set(frame["spectrum"]) == {"Cd I", "Zn I"}
    assert frame.attrs["medium"] == "vacuum"
    np.testing.assert_array_equal(frame["wavelength_nm"].to_numpy(), lines.wavelength_nm)
    assert frame["verified"].dtype == bool


def test_line_list_is_immutable_and_validated() -> None:
    lines = load_line_list("Na")
    with pytest.raises(ValueError, match="read-only"):
        lines.wavelength_nm[0] = 1.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        lines.medium = "vacuum"  # type: ignore[misc]
    with pytest.raises(ValueError, match="intensity has shape"):
        LineList(np.array([500.0, 600.0]), np.array([1.0]), np.array(["Ne", "Ne"]),
                 np.zeros(2, bool), np.zeros(2, bool), np.ones(2, bool))
    with pytest.raises(ValueError, match="medium must be one of"):
        LineList(np.array([500.0]), np.array([1.0]), np.array(["Ne"]), np.zeros(1, bool),
                 np.zeros(1, bool), np.ones(1, bool), medium="water")


def test_file_reads_are_cached() -> None:
    load_line_list("Xe")
    before = linelists._read_element.cache_info()
    load_line_list(["Xe", "Kr"])
    load_line_list("Xe", medium="vacuum")
    after = linelists._read_element.cache_info()
    assert after.hits >= before.hits + 2
    assert after.currsize <= len(ELEMENTS)


def test_balmer_lines_follow_the_rydberg_formula() -> None:
    # Independent physics: Rydberg formula with the hydrogen reduced mass,
    # 1/lambda_vac = R_inf / (1 + m_e/m_p) * (1/4 - 1/n^2), CODATA 2018 constants via
    # scipy.constants, converted to standard air with Peck & Reeder 1972 (the NIST ASD
    # convention). The listed values are observed NIST ASD air wavelengths of the unresolved
    # fine-structure blends, so they may differ from this gross-structure value by up to the
    # fine-structure spread of the two shells: R_inf alpha^2 (n-1)/n^4 per shell n (Dirac
    # energies to order alpha^2; common practice, e.g. Bethe & Salpeter).
    r_inf = constants.Rydberg
    mass_ratio = constants.physical_constants["proton-electron mass ratio"][0]
    r_h = r_inf / (1.0 + 1.0 / mass_ratio)
    alpha = constants.fine_structure
    lines = load_line_list("H")
    n_upper = np.arange(3, 3 + len(lines))[::-1]  # H8 ... H-alpha, sorted by wavelength
    assert len(lines) >= 5  # H-alpha .. H-epsilon at least
    for n, listed in zip(n_upper, lines.wavelength_nm):
        vacuum = 1e9 / (r_h * (0.25 - 1.0 / n**2))
        air = airvac.vacuum_to_air(vacuum, method="peck_reeder1972")
        spread = r_inf * alpha**2 * ((2 - 1) / 2**4 + (n - 1) / n**4)  # m^-1
        tolerance = (vacuum * 1e-9) ** 2 * spread * 1e9  # nm
        assert abs(listed - air) <= tolerance, (n, listed, air, tolerance)
        # The reduced-mass correction is far larger than the tolerance, so the check can fail.
        no_reduced_mass = airvac.vacuum_to_air(1e9 / (r_inf * (0.25 - 1.0 / n**2)),
                                               method="peck_reeder1972")
        assert abs(listed - no_reduced_mass) > 10 * tolerance
    assert set(lines.spectrum) == {"H I"}
    assert lines.blend.all()  # every Balmer line is an unresolved fine-structure blend


# Ar II lines an argon lamp shows, NIST ASD air wavelengths (ASDpkg copy named in Ar.ecsv) with
# the ASD relative intensity of the Ar II data set: the measured lines at 442.6, 454.5,
# 465.8, 476.5, 488.0 and 496.5 nm.
AR_II_NIST = [(442.60008, 1514), (454.50516, 1738), (465.79009, 1445), (476.48644, 2344),
              (487.98634, 2239), (496.50794, 891)]


def test_argon_lamp_list_holds_ar_ii_on_the_ar_i_scale() -> None:
    argon = load_line_list("Ar")
    assert {"Ar I", "Ar II"} <= set(argon.spectrum)
    # Bridge documented in Ar.ecsv: Ar I 810.3693 nm has NIST ASD intensity 20000 (Ar I scale)
    # and 12023 in the ASD Ar II data set.
    bridge = 20000 / 12023
    i_bridge = int(np.argmin(np.abs(argon.wavelength_nm - 810.3693)))
    assert argon.intensity[i_bridge] == 20000 and argon.spectrum[i_bridge] == "Ar I"
    for wavelength, asd_intensity in AR_II_NIST:
        i = int(np.argmin(np.abs(argon.wavelength_nm - wavelength)))
        assert argon.wavelength_nm[i] == pytest.approx(wavelength, abs=1e-7)
        assert argon.spectrum[i] == "Ar II"
        assert argon.intensity[i] == pytest.approx(asd_intensity * bridge, rel=1e-3)
        assert not argon.weak[i]


@pytest.mark.parametrize(("element", "near_nm"), [
    # Lines seen on real frames of small grism spectrographs (issue report, rounded to 0.1 nm):
    ("Ar", 518.8), ("Ar", 549.6), ("Ar", 560.7), ("Ar", 675.3), ("Ar", 720.7), ("Ne", 660.3),
    ("H", 656.3),
])
def test_lines_seen_on_small_spectrograph_frames_are_listed(element: str, near_nm: float) -> None:
    lines = load_line_list(element, wavelength_range_nm=(near_nm - 0.06, near_nm + 0.06))
    assert len(lines) == 1


def _write_old_layout(path: Path, meta: dict) -> None:
    # The column set of the files shipped before the spectrum column existed.
    table = Table()
    table["wavelength"] = np.array([585.24878, 640.2248]) * u.nm
    table["intensity"] = [20000.0, 20000.0]
    table["blend"] = [False, False]
    table["weak"] = [False, False]
    table["verified"] = [True, True]
    table["source"] = ["ASD556", "ASD556"]
    table.meta.update(meta)
    table.write(path, format="ascii.ecsv")


def test_loader_reads_the_old_column_set(tmp_path: Path) -> None:
    path = tmp_path / "Ne.ecsv"
    _write_old_layout(path, {"element": "Ne", "spectrum": "Ne I", "medium": "air"})
    lines = linelists._read_table(path, "Ne")
    np.testing.assert_array_equal(lines.wavelength_nm, [585.24878, 640.2248])
    np.testing.assert_array_equal(lines.spectrum, ["Ne I", "Ne I"])
    assert lines.verified.all() and not lines.blend.any()
    unnamed = tmp_path / "Xx.ecsv"
    _write_old_layout(unnamed, {"medium": "air"})
    np.testing.assert_array_equal(linelists._read_table(unnamed, "Xx").spectrum, ["", ""])


def test_loader_rejects_missing_columns_and_vacuum_files(tmp_path: Path) -> None:
    path = tmp_path / "Ne.ecsv"
    _write_old_layout(path, {"medium": "air"})
    table = Table.read(path, format="ascii.ecsv")
    table.remove_column("weak")
    table.write(path, format="ascii.ecsv", overwrite=True)
    with pytest.raises(ValueError, match=r"Ne\.ecsv: line list lacks column\(s\) \['weak'\]"):
        linelists._read_table(path, "Ne")
    vacuum = tmp_path / "Ar.ecsv"
    _write_old_layout(vacuum, {"medium": "vacuum"})
    with pytest.raises(ValueError, match="Ar.ecsv: line list must give air wavelengths"):
        linelists._read_table(vacuum, "Ar")


def test_spectrum_field_defaults_and_is_validated() -> None:
    lines = LineList(np.array([500.0, 600.0]), np.ones(2), np.array(["Ne", "Ne"]),
                     np.zeros(2, bool), np.zeros(2, bool), np.ones(2, bool))
    np.testing.assert_array_equal(lines.spectrum, ["", ""])
    with pytest.raises(ValueError, match="spectrum has shape"):
        LineList(np.array([500.0, 600.0]), np.ones(2), np.array(["Ne", "Ne"]), np.zeros(2, bool),
                 np.zeros(2, bool), np.ones(2, bool), spectrum=np.array(["Ne I"]))
    vacuum = load_line_list("Ar", medium="vacuum", wavelength_range_nm=(480.0, 490.0))
    assert set(vacuum.spectrum) == {"Ar II"}
