"""``edgefit inspect``: the table it prints for good files.

The files are written here; the expected numbers (rows, orders, arms,
channel counts, exposures, total counts, energy/wavelength ranges) are
read back with plain astropy.io.fits and converted with
lambda = hc / E, hc = 12.398419843320026 keV Angstrom (CODATA 2018).
"""
from __future__ import annotations

import numpy as np
from astropy.io import fits

from edgefit.cli import main
from edgefit.data import simulate_spectrum, write_pha

HC = 12.398419843320026


def _table(out):
    lines = [ln for ln in out.strip().splitlines() if ln.strip()]
    header = lines[0].split()
    # "PHA II" is two words, so split once more than the header has columns
    return header, [ln.split(None, len(header)) for ln in lines[1:]]


def test_inspect_pha2_rmf_arf(tmp_path, small_response, response_files, capsys):
    rmf, arf = response_files
    flux = np.full(small_response.n_energies, 1e-3)
    specs = [simulate_spectrum(flux, small_response, 2e4, 30 + k,
                               meta={"order": o, "arm": a})
             for k, (o, a) in enumerate([(-1, 1), (1, 1), (-1, 2)])]
    pha = tmp_path / "grating.pha"
    write_pha(pha, specs, respfile=rmf.name, ancrfile=arf.name)
    rc = main(["inspect", str(pha), str(rmf), str(arf)])
    out = capsys.readouterr()
    assert rc == 0 and out.err == ""
    header, rows = _table(out.out)
    assert header[:6] == ["file", "kind", "row", "order", "arm", "channels"]
    assert len(rows) == 5
    with fits.open(pha) as h:
        counts = h["SPECTRUM"].data["COUNTS"].sum(axis=1)
        orders = h["SPECTRUM"].data["TG_M"]
    for i, r in enumerate(rows[:3]):
        assert r[1:3] == ["PHA", "II"]            # kind column "PHA II"
        assert int(r[3]) == i and int(r[4]) == orders[i]
        assert int(r[6]) == small_response.n_channels
        assert float(r[9]) == 2e4
        assert int(r[10]) == counts[i]
    with fits.open(rmf) as h:
        emin, emax = h["EBOUNDS"].data["E_MIN"].min(), h["EBOUNDS"].data["E_MAX"].max()
    e_lo, e_hi = map(float, rows[0][7].split("-"))
    w_lo, w_hi = map(float, rows[0][8].split("-"))
    assert abs(e_lo - emin) < 1e-3 * emin and abs(e_hi - emax) < 1e-3 * emax
    assert abs(w_lo - HC / emax) < 1e-3 * w_lo and abs(w_hi - HC / emin) < 1e-3 * w_hi
    assert rows[3][1] == "RMF" and rows[4][1] == "ARF"


def test_inspect_row_filter_and_missing_respfile(tmp_path, small_response, capsys):
    flux = np.full(small_response.n_energies, 1e-3)
    specs = [simulate_spectrum(flux, small_response, 1e3, k, meta={"order": o, "arm": 2})
             for k, o in enumerate((-1, 1))]
    pha = tmp_path / "two.pha"
    write_pha(pha, specs, respfile="absent.rmf")
    rc = main(["inspect", str(pha), "--order", "1"])
    out = capsys.readouterr().out
    header, rows = _table(out)
    assert rc == 0 and len(rows) == 1
    assert "RESPFILE absent.rmf not found" in out


def test_inspect_continues_after_a_bad_file(tmp_path, small_response, response_files, capsys):
    rmf, _ = response_files
    bad = tmp_path / "bad.fits"
    bad.write_bytes(b"\x00" * 100)
    rc = main(["inspect", str(bad), str(rmf)])
    out = capsys.readouterr()
    assert rc == 2
    assert len(out.err.strip().splitlines()) == 1 and "bad.fits" in out.err
    assert "RMF" in out.out
