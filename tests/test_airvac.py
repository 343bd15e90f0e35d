"""Tests of wavecal.airvac: against specutils, published conversion examples, and itself."""
from __future__ import annotations

import astropy.units as u
import numpy as np
import pytest
from specutils.utils import wcs_utils

from wavecal import airvac

PM = 1e-3  # one picometre in nm
ANGSTROM = 0.1  # in nm

SPECUTILS_NAME = {"ciddor1996": "Ciddor1996", "edlen1966": "Edlen1966",
                  "peck_reeder1972": "PeckReeder1972"}
VACUUM_GRID = np.geomspace(200.0, 20000.0, 400)


def test_method_registry_matches_specutils_names() -> None:
    assert set(airvac.AIRVAC_METHODS) == set(SPECUTILS_NAME)
    assert airvac.DEFAULT_METHOD == "ciddor1996"


@pytest.mark.parametrize("method", airvac.AIRVAC_METHODS)
def test_refractive_index_matches_specutils(method: str) -> None:
    # specutils 2.4.0 specutils.utils.wcs_utils.refraction_index (standard air, CO2 450 ppm)
    expected = wcs_utils.refraction_index(VACUUM_GRID * u.nm, method=SPECUTILS_NAME[method])
    np.testing.assert_allclose(airvac.refractive_index_air(VACUUM_GRID, method=method) - 1.0,
                               np.asarray(expected) - 1.0, rtol=1e-9)


@pytest.mark.parametrize("method", airvac.AIRVAC_METHODS)
def test_vacuum_to_air_matches_specutils(method: str) -> None:
    # specutils 2.4.0 specutils.utils.wcs_utils.vac_to_air; tolerance 0.05 pm
    expected = wcs_utils.vac_to_air(VACUUM_GRID * u.nm, method=SPECUTILS_NAME[method]).to_value(u.nm)
    np.testing.assert_allclose(airvac.vacuum_to_air(VACUUM_GRID, method=method), expected,
                               rtol=0, atol=0.05 * PM)


@pytest.mark.parametrize("method", airvac.AIRVAC_METHODS)
def test_air_to_vacuum_matches_specutils(method: str) -> None:
    # specutils 2.4.0 specutils.utils.wcs_utils.air_to_vac with its iterative scheme; 0.05 pm
    air = np.geomspace(200.0, 19990.0, 400)
    expected = wcs_utils.air_to_vac(air * u.nm, method=SPECUTILS_NAME[method],
                                    scheme="iteration").to_value(u.nm)
    np.testing.assert_allclose(airvac.air_to_vacuum(air, method=method), expected,
                               rtol=0, atol=0.05 * PM)


def test_published_vacuum_to_air_ciddor() -> None:
    # IDL Astronomy Library VACTOAIR documentation example (Ciddor 1996): 2000 Å vacuum ->
    # 1999.353 Å air; tolerance half a unit of the printed last digit.
    air_angstrom = airvac.vacuum_to_air(2000.0 * ANGSTROM, method="ciddor1996") / ANGSTROM
    assert air_angstrom == pytest.approx(1999.353, abs=0.0005)


def test_published_air_to_vacuum_ciddor_krypton() -> None:
    # IDL Astronomy Library AIRTOVAC documentation example (Ciddor 1996): the krypton line
    # 6056.125 Å air -> 6057.8019 Å vacuum; tolerance half a unit of the printed last digit.
    vacuum_angstrom = airvac.air_to_vacuum(6056.125 * ANGSTROM, method="ciddor1996") / ANGSTROM
    assert vacuum_angstrom == pytest.approx(6057.8019, abs=0.00005)


def test_published_air_to_vacuum_h_beta() -> None:
    # astrolibR airtovac documentation example (a port of IDL AIRTOVAC, Ciddor 1996):
    # H-beta 4861.363 Å air -> 4862.721 Å vacuum; tolerance half a unit of the last digit.
    vacuum_angstrom = airvac.air_to_vacuum(4861.363 * ANGSTROM) / ANGSTROM
    assert vacuum_angstrom == pytest.approx(4862.721, abs=0.0005)


@pytest.mark.parametrize(("air_angstrom", "vacuum_angstrom"),
                         [(8495.3595, 8497.6937), (8654.3828, 8656.7600)])
def test_published_neon_pairs_peck_reeder(air_angstrom: float, vacuum_angstrom: float) -> None:
    # Sansonetti, Blackwell & Saloman 2004, J. Res. NIST 109, 371 (Ne I; vacuum values from the
    # Peck & Reeder 1972 formula), as reproduced at https://www.iafe.uba.ar/aeronomia/NELINES.html.
    # Tolerance: one unit of the printed last digit (0.0001 Å).
    for method in ("peck_reeder1972", "edlen1966"):
        result = airvac.air_to_vacuum(air_angstrom * ANGSTROM, method=method) / ANGSTROM
        assert result == pytest.approx(vacuum_angstrom, abs=0.0001), method
    back = airvac.vacuum_to_air(vacuum_angstrom * ANGSTROM, method="peck_reeder1972") / ANGSTROM
    assert back == pytest.approx(air_angstrom, abs=0.0001)


def test_methods_agree_in_the_visible() -> None:
    # Standard-air formulas agree within ~0.02 pm over 300-1000 nm (reference notes §2, computed
    # with specutils); 0.05 pm is the tolerance suggested there.
    vacuum = np.linspace(300.0, 1000.0, 200)
    results = [airvac.vacuum_to_air(vacuum, method=m) for m in airvac.AIRVAC_METHODS]
    for other in results[1:]:
        np.testing.assert_allclose(other, results[0], rtol=0, atol=0.05 * PM)


def test_size_of_the_correction() -> None:
    # λ_vac − λ_air = 0.087 nm at 300 nm and 0.274 nm at 1000 nm (Morton 2000 via specutils,
    # reference notes §2); all standard-air formulas agree with that to < 0.1 pm.
    shift = np.array([300.0, 1000.0]) - airvac.vacuum_to_air(np.array([300.0, 1000.0]))
    np.testing.assert_allclose(shift, [0.087445, 0.274094], rtol=0, atol=1e-4)


@pytest.mark.parametrize("method", airvac.AIRVAC_METHODS)
def test_round_trips_are_exact(method: str) -> None:
    air = airvac.vacuum_to_air(VACUUM_GRID, method=method)
    np.testing.assert_allclose(airvac.air_to_vacuum(air, method=method), VACUUM_GRID,
                               rtol=4e-16, atol=0)
    air_grid = np.geomspace(air[0], air[-1], 400)
    vacuum = airvac.air_to_vacuum(air_grid, method=method)
    np.testing.assert_allclose(airvac.vacuum_to_air(vacuum, method=method), air_grid,
                               rtol=4e-16, atol=0)


def test_shapes_and_types() -> None:
    assert isinstance(airvac.vacuum_to_air(500.0), float)
    assert isinstance(airvac.air_to_vacuum(500.0), float)
    grid = np.linspace(400.0, 900.0, 12).reshape(3, 4)
    assert airvac.air_to_vacuum(grid).shape == (3, 4)
    assert airvac.vacuum_to_air(grid).shape == (3, 4)
    assert airvac.refractive_index_air([500.0, 600.0]).shape == (2,)
    assert airvac.air_to_vacuum(np.array([])).shape == (0,)
    assert np.all(airvac.air_to_vacuum(grid) > grid)


@pytest.mark.parametrize("function", [airvac.vacuum_to_air, airvac.refractive_index_air,
                                      airvac.air_to_vacuum])
@pytest.mark.parametrize("bad", [199.0, 20001.0, np.nan, np.inf, -500.0])
def test_out_of_range_raises(function, bad: float) -> None:
    with pytest.raises(ValueError, match=r"must lie within .* \(vacuum 200-20000 nm"):
        function(np.array([500.0, bad]))


def test_air_range_matches_the_vacuum_range() -> None:
    lowest_air = airvac.vacuum_to_air(200.0)
    assert airvac.air_to_vacuum(lowest_air) == pytest.approx(200.0, rel=1e-15)
    with pytest.raises(ValueError, match="wavelength_air_nm"):
        airvac.air_to_vacuum(lowest_air - 1e-6)
    with pytest.raises(ValueError, match="wavelength_vacuum_nm"):
        airvac.vacuum_to_air(199.99)


@pytest.mark.parametrize("function", [airvac.vacuum_to_air, airvac.refractive_index_air,
                                      airvac.air_to_vacuum])
def test_unknown_method_raises(function) -> None:
    with pytest.raises(ValueError, match="method must be one of"):
        function(500.0, method="Ciddor1996")
