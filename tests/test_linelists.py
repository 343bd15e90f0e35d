"""Tests of the shipped line lists (line_lists/*.ecsv) and wavecal.linelists."""
from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from wavecal import airvac, linelists
from wavecal.linelists import LineList, available_elements, load_line_list

PM = 1e-3  # one picometre in nm
ELEMENTS = ("Ar", "Cd", "He", "Hg", "Kr", "Na", "Ne", "Xe", "Zn")
LIST_DIR = Path(__file__).resolve().parents[1] / "line_lists"

# Lines listed / verified per element, from the verification summary of the project's reference
# notes (reference-values.md §5); Kr counts the Kr-86 standard derived from the 1960 metre.
COUNTS = {"Hg": (27, 15), "Ne": (74, 41), "Ar": (46, 46), "Kr": (27, 12), "Xe": (19, 5),
          "He": (17, 12), "Cd": (10, 4), "Zn": (10, 1), "Na": (10, 6)}


def _from_memory(element: str, wavelength: np.ndarray) -> np.ndarray:
    """Which lines the reference notes (§1, §5) mark MEM, by the rule stated there per element."""
    w = wavelength
    rules = {
        "Hg": (w < 400) | (w > 1000),             # UV 253-366 nm, 1013.975, 1128.7
        "Ne": ((w > 700) & (w < 840)) | (w > 877),  # 703-838 nm and > 877 nm
        "Ar": np.zeros(w.shape, bool),            # all verified
        "Kr": np.isclose(w, 431.958) | (w > 700),  # 431.958 and the near-IR lines
        "Xe": np.isclose(w, 473.415) | (w > 700),  # 473.415 and the near-IR lines
        "He": np.isin(w, [318.775, 388.865, 706.5190, 728.1349, 1083.03]),
        "Cd": w < 400,                            # UV
        "Zn": ~np.isclose(w, 636.2348),           # all but 636.2348
        "Na": np.isin(w, [330.237, 330.298, 818.326, 819.482]),
    }
    return rules[element]


def test_available_elements() -> None:
    assert available_elements() == ELEMENTS


@pytest.mark.parametrize("element", ELEMENTS)
def test_ecsv_file_columns_units_metadata(element: str) -> None:
    table = Table.read(LIST_DIR / f"{element}.ecsv", format="ascii.ecsv")
    for name in ("wavelength", "intensity", "blend", "weak", "verified", "source"):
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
    wavelength = np.asarray(table["wavelength"])
    assert np.all(np.diff(wavelength) > 0)
    assert np.all(np.isfinite(table["intensity"])) and np.all(table["intensity"] > 0)
    assert (len(table), int(np.sum(table["verified"]))) == COUNTS[element]


@pytest.mark.parametrize("element", ELEMENTS)
def test_unverified_exactly_the_lines_from_memory(element: str) -> None:
    table = Table.read(LIST_DIR / f"{element}.ecsv", format="ascii.ecsv")
    wavelength = np.asarray(table["wavelength"])
    verified = np.asarray(table["verified"])
    memory = _from_memory(element, wavelength)
    np.testing.assert_array_equal(verified, ~memory)
    np.testing.assert_array_equal(np.asarray(table["source"])[~verified], "from memory")
    assert "from memory" not in set(np.asarray(table["source"])[verified])
    np.testing.assert_array_equal(table.meta["lines_from_memory_nm"], wavelength[~verified])


@pytest.mark.parametrize("element", ELEMENTS)
def test_every_element_loads(element: str) -> None:
    lines = load_line_list(element)
    assert len(lines) == COUNTS[element][0]
    assert lines.medium == "air"
    assert set(lines.element) == {element}
    assert np.all(np.diff(lines.wavelength_nm) > 0)
    assert lines.verified.sum() == COUNTS[element][1]


# (element, air wavelength nm): NIST ASD v5.5.6 values (via the ASD556 copy named in the ECSV
# metadata), except Ne 849.53595 and 865.43828: Sansonetti et al. 2004, J. Res. NIST 109, 371.
NIST_VALUES = [
    ("Hg", 404.6565), ("Hg", 435.8335), ("Hg", 546.0750), ("Hg", 576.9610), ("Hg", 579.0670),
    ("Ne", 585.24878), ("Ne", 640.22480), ("Ne", 692.94672), ("Ne", 849.53595),
    ("Ne", 865.43828), ("Ar", 696.5431), ("Ar", 763.5106), ("Ar", 811.5311),
    ("Kr", 557.028944), ("Kr", 587.091599), ("Xe", 467.12258), ("He", 587.5621),
    ("He", 667.8151), ("Cd", 479.99123), ("Cd", 643.84695), ("Zn", 636.2348),
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
    lines = load_line_list(element)
    w = lines.wavelength_nm
    separation = np.abs(w[:, None] - w[None, :]) + np.diag(np.full(len(w), np.inf))
    close = separation.min(axis=1) <= 0.15
    assert np.all(lines.blend[close])
    # Lines flagged without a close neighbour are the documented fine-structure blends.
    fine_structure = lines.blend & ~close
    assert element in ("He", "Na") or not fine_structure.any()


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
    assert len(merged) == COUNTS["Hg"][0] + COUNTS["Ar"][0]
    assert np.all(np.diff(merged.wavelength_nm) >= 0)
    assert set(merged.element) == {"Hg", "Ar"}
    hg = load_line_list("Hg")
    np.testing.assert_array_equal(merged.wavelength_nm[merged.element == "Hg"], hg.wavelength_nm)
    np.testing.assert_array_equal(merged.intensity[merged.element == "Hg"], hg.intensity)


def test_unknown_element_names_the_available_ones() -> None:
    with pytest.raises(ValueError, match="'Fe'.*available: Ar, Cd, He, Hg, Kr, Na, Ne, Xe, Zn"):
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
                                   "verified"]
    assert len(frame) == len(lines) == 20
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
