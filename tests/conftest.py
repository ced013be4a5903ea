"""Shared fixtures: an isolated dust-table cache for the whole session, one
small grating-like response written to disk as RMF + ARF, and a helper
that writes a PHA."""
from __future__ import annotations

import numpy as np
import pytest

from edgefit.data import gaussian_response, write_response


@pytest.fixture(scope="session", autouse=True)
def _isolated_cache(tmp_path_factory):
    """Send computed dust tables to a session temporary folder, never to the
    user's cache; tables built by one test are reused by the others."""
    mp = pytest.MonkeyPatch()
    mp.setenv("EDGEFIT_CACHE_DIR", str(tmp_path_factory.mktemp("edgefit-cache")))
    yield
    mp.undo()


def _area(energy_kev):
    """A smooth invented effective-area curve, cm^2 (simulated)."""
    return 20.0 + 5.0 * np.sin(3.0 * energy_kev)


@pytest.fixture(scope="session")
def small_response():
    """300 channels over 1.6-2.1 keV in wavelength order, FWHM 0.02 A,
    400 energy bins over 1.55-2.15 keV (an invented, simulated instrument)."""
    return gaussian_response(np.linspace(1.55, 2.15, 401), np.linspace(1.6, 2.1, 301), 0.02,
                             _area, wavelength_order=True)


@pytest.fixture
def response_files(tmp_path, small_response):
    """(rmf path, arf path) of ``small_response`` written to tmp_path."""
    rmf, arf = tmp_path / "sim.rmf", tmp_path / "sim.arf"
    write_response(small_response, rmf, arf, simulated=True)
    return rmf, arf
