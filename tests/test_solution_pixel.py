"""``Solution.pixel`` is NaN for a wavelength that lands off the detector (README, Python API)."""
import math

import numpy as np

from pathlib import Path

from wavecal.solution import load_solution

SOLUTION = Path(__file__).parent / "data" / "solution_v1.json"


def test_pixel_is_nan_off_the_detector():
    solution = load_solution(SOLUTION)
    n = solution.model.n_pixels
    edges = solution.wavelength(np.array([-0.5, n - 0.5]))
    inside = solution.wavelength(np.array([0.0, 0.5 * (n - 1), n - 1.0]))
    np.testing.assert_allclose(solution.pixel(inside), [0.0, 0.5 * (n - 1), n - 1.0], atol=1e-6)
    step = float(np.diff(edges)[0]) / n  # about one pixel's width in nm
    beyond = np.array([edges[0] - 10 * step, edges[1] + 10 * step])
    assert np.isnan(solution.pixel(beyond)).all()
    assert math.isnan(solution.pixel(float(beyond[0])))
    assert math.isnan(solution.pixel(float(beyond[1]), 5.0))
    assert math.isfinite(solution.pixel(float(inside[1])))
