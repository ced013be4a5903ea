"""Boundary unit conversion and data/cache folder lookup."""
import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u

from edgefit import _paths
from edgefit._units import HC_KEV_ANGSTROM, as_angstrom, as_kev, kev_to_angstrom
from edgefit.errors import PhysicsDataError


def test_hc_constant_matches_codata():
    # h c from astropy's CODATA 2018 constants; agreement to 1e-12 relative.
    hc = (const.h * const.c).to_value(u.keV * u.AA)
    assert HC_KEV_ANGSTROM == pytest.approx(hc, rel=1e-12)


def test_as_kev_accepts_spectral_quantities():
    # Si K edge near 1.839 keV (xraydb / Elam et al. 2002) is 6.742 Angstrom.
    assert as_kev(1.839) == 1.839
    assert as_kev(1839 * u.eV) == pytest.approx(1.839, rel=1e-12)
    lam = kev_to_angstrom(1.839)
    assert as_kev(lam * u.AA) == pytest.approx(1.839, rel=1e-12)
    assert as_angstrom(1.839 * u.keV) == pytest.approx(lam, rel=1e-12)
    np.testing.assert_allclose(as_kev([1, 2] * u.keV), [1, 2])
    with pytest.raises(u.UnitConversionError, match="energy"):
        as_kev(3 * u.s)


def test_data_dir_env_override(tmp_path, monkeypatch):
    monkeypatch.setenv("EDGEFIT_DATA_DIR", str(tmp_path))
    assert _paths.data_dir() == tmp_path
    with pytest.raises(PhysicsDataError, match="missing"):
        _paths.data_file("no-such-table.ecsv")


def test_cache_dir_env_override(tmp_path, monkeypatch):
    target = tmp_path / "cache"
    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(target))
    assert _paths.cache_dir() == target and target.is_dir()
