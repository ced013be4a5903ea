"""Bad input: each kind of broken file raises its own error class naming
the file, and ``edgefit inspect`` turns it into one stderr line and a
non-zero exit status (never a traceback).

The broken files are made here with plain astropy.io.fits (or by cutting
bytes), following the OGIP/92-007 and CAL/GEN/92-002 layouts (the OGIP
memos of Arnaud, George & Tennant 1992 and George et al. 1992, from
memory).  No physics or statistics value is checked here.
"""
from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pytest
from astropy.io import fits

from edgefit import errors
from edgefit.cli import main
from edgefit.data import (gaussian_response, read_arf, read_pha, read_response, read_rmf,
                          simulate_spectrum, write_arf, write_pha, write_rmf)


def _pha(tmp_path, response, name="s.pha", **kw):
    spec = simulate_spectrum(np.full(response.n_energies, 1e-3), response, 1e3, 8)
    path = tmp_path / name
    write_pha(path, spec, **kw)
    return path


def _edit(path, func):
    with fits.open(path, mode="update") as h:
        func(h)


def _case_not_fits(tmp_path, resp):
    p = tmp_path / "notes.pha"
    p.write_text("this is a text file, not FITS\n" * 200)
    return p, lambda: read_pha(p), [str(p)]


def _case_truncated_data(tmp_path, resp):
    p = _pha(tmp_path, resp)
    data = p.read_bytes()
    p.write_bytes(data[:len(data) - 4000])   # cut into the SPECTRUM table data
    return p, lambda: read_pha(p), [str(p)]


def _case_truncated_header(tmp_path, resp):
    p = _pha(tmp_path, resp)
    p.write_bytes(p.read_bytes()[:1000])     # less than one header block
    return p, lambda: read_pha(p), [str(p)]


def _case_missing_extension(tmp_path, resp):
    p = tmp_path / "noebounds.rmf"
    write_rmf(p, resp)
    with fits.open(p) as h:   # keep PRIMARY and MATRIX, drop EBOUNDS
        fits.HDUList([h[0], h[1]]).writeto(tmp_path / "cut.rmf")
    q = tmp_path / "cut.rmf"
    return q, lambda: read_rmf(q), [str(q)]


def _case_missing_column(tmp_path, resp):
    p = _pha(tmp_path, resp)
    with fits.open(p) as h:
        cols = [c for c in h[1].columns if c.name != "COUNTS"]
        t = fits.BinTableHDU.from_columns(cols, header=h[1].header, name="SPECTRUM")
        fits.HDUList([h[0].copy(), t]).writeto(tmp_path / "nocounts.pha")
    q = tmp_path / "nocounts.pha"
    return q, lambda: read_pha(q), [str(q)]


def _case_channel_mismatch(tmp_path, resp):
    other = gaussian_response(np.linspace(1.55, 2.15, 401), np.linspace(1.6, 2.1, 201), 0.02,
                              10.0)
    write_rmf(tmp_path / "other.rmf", other)
    p = _pha(tmp_path, resp, respfile="other.rmf")   # 300-channel spectrum, 200-channel RMF
    return p, lambda: read_pha(p), [str(p)]


def _case_grid_mismatch(tmp_path, resp):
    write_rmf(tmp_path / "sim.rmf", resp)
    edges = np.linspace(1.5, 2.2, 351)                # not the RMF's grid
    write_arf(tmp_path / "odd.arf", edges[:-1], edges[1:], np.full(350, 10.0))
    p = _pha(tmp_path, resp, respfile="sim.rmf", ancrfile="odd.arf")
    # the error names the ARF whose grid disagrees
    return p, lambda: read_response(tmp_path / "sim.rmf", tmp_path / "odd.arf"), [str(p)]


def _case_non_monotonic_rmf(tmp_path, resp):
    p = tmp_path / "swap.rmf"
    write_rmf(p, resp)

    def swap(h):
        lo = h["MATRIX"].data["ENERG_LO"]
        hi = h["MATRIX"].data["ENERG_HI"]
        lo[10], lo[11] = lo[11], lo[10]
        hi[10], hi[11] = hi[11], hi[10]
    _edit(p, swap)
    return p, lambda: read_rmf(p), [str(p)]


def _case_non_monotonic_arf(tmp_path, resp):
    edges = np.linspace(1.5, 2.2, 101)
    lo = edges[:-1].copy()
    hi = edges[1:].copy()
    lo[[40, 41]] = lo[[41, 40]]
    hi[[40, 41]] = hi[[41, 40]]
    p = tmp_path / "swap.arf"
    write_arf(p, lo, hi, np.ones(100))
    return p, lambda: read_arf(p), [str(p)]


def _case_zero_exposure(tmp_path, resp):
    p = _pha(tmp_path, resp)
    _edit(p, lambda h: h["SPECTRUM"].header.__setitem__("EXPOSURE", 0.0))
    return p, lambda: read_pha(p), [str(p)]


def _case_negative_exposure(tmp_path, resp):
    p = _pha(tmp_path, resp)
    _edit(p, lambda h: h["SPECTRUM"].header.__setitem__("EXPOSURE", -10.0))
    return p, lambda: read_pha(p), [str(p)]


def _case_nan_counts(tmp_path, resp):
    n = resp.n_channels
    counts = np.ones(n)
    counts[17] = np.nan
    cols = [fits.Column("CHANNEL", "J", array=np.arange(1, n + 1)),
            fits.Column("COUNTS", "D", array=counts)]
    t = fits.BinTableHDU.from_columns(cols, name="SPECTRUM")
    t.header.update({"HDUCLAS1": "SPECTRUM", "EXPOSURE": 100.0})
    p = tmp_path / "nan.pha"
    fits.HDUList([fits.PrimaryHDU(), t]).writeto(p)
    return p, lambda: read_pha(p), [str(p)]


def _case_missing_row(tmp_path, resp):
    specs = [simulate_spectrum(np.full(resp.n_energies, 1e-3), resp, 1e3, k,
                               meta={"order": o, "arm": 1}) for k, o in enumerate((-1, 1))]
    p = tmp_path / "two.pha"
    write_pha(p, specs)
    return p, lambda: read_pha(p, order=3), [str(p), "--order", "3"]


def _blamed(case, path):
    """Name of the file the error message must mention."""
    return {"grid_mismatch": "odd.arf", "channel_mismatch": "s.pha"}.get(case, path.name)


CASES = {
    "not_fits": (_case_not_fits, errors.NotFITSError),
    "truncated_data": (_case_truncated_data, errors.TruncatedFileError),
    "truncated_header": (_case_truncated_header, errors.TruncatedFileError),
    "missing_extension": (_case_missing_extension, errors.MissingExtensionError),
    "missing_column": (_case_missing_column, errors.MissingColumnError),
    "channel_mismatch": (_case_channel_mismatch, errors.ChannelMismatchError),
    "grid_mismatch": (_case_grid_mismatch, errors.GridMismatchError),
    "non_monotonic_rmf": (_case_non_monotonic_rmf, errors.BadGridError),
    "non_monotonic_arf": (_case_non_monotonic_arf, errors.BadGridError),
    "zero_exposure": (_case_zero_exposure, errors.BadExposureError),
    "negative_exposure": (_case_negative_exposure, errors.BadExposureError),
    "nan_counts": (_case_nan_counts, errors.BadCountsError),
    "missing_row": (_case_missing_row, errors.MissingRowError),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_input_raises_its_own_error(tmp_path, small_response, case):
    build, cls = CASES[case]
    path, call, _ = build(tmp_path, small_response)
    with pytest.raises(errors.InputFileError) as info:
        call()
    assert type(info.value) is cls
    assert _blamed(case, path) in str(info.value)


@pytest.mark.parametrize("case", sorted(CASES))
def test_inspect_prints_one_line_and_fails(tmp_path, small_response, case, capsys):
    build, cls = CASES[case]
    path, _, argv = build(tmp_path, small_response)
    rc = main(["inspect", *argv])
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert rc != 0
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("edgefit inspect: error: ")
    assert "Traceback" not in captured.err
    assert _blamed(case, path) in lines[0]


def test_missing_file_is_one_line(tmp_path, capsys):
    rc = main(["inspect", str(tmp_path / "absent.pha")])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "absent.pha" in err[0]


def test_installed_console_script_reports_bad_file(tmp_path):
    exe = shutil.which("edgefit")
    assert exe is not None, "the edgefit console script is not installed (pip install -e .)"
    p = tmp_path / "plain.txt"
    p.write_text("not FITS\n" * 400)
    proc = subprocess.run([exe, "inspect", str(p)], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2
    assert proc.stderr.strip().count("\n") == 0
    assert "plain.txt" in proc.stderr and "not a FITS file" in proc.stderr
    assert "Traceback" not in proc.stderr


def test_first_channel_mismatch_is_refused(tmp_path, small_response):
    # OGIP/92-007: CHANNEL numbering starts at TLMIN of the spectrum's CHANNEL
    # column; CAL/GEN/92-002: at TLMIN of F_CHAN in the RMF.  The same number
    # of channels starting one apart would shift every channel by one.
    write_rmf(tmp_path / "s.rmf", small_response)
    p = _pha(tmp_path, small_response, respfile="s.rmf")
    _edit(p, lambda h: h["SPECTRUM"].data.__setitem__(
        "CHANNEL", h["SPECTRUM"].data["CHANNEL"] - 1))
    _edit(p, lambda h: h["SPECTRUM"].header.__setitem__("TLMIN1", 0))
    with pytest.raises(errors.ChannelMismatchError, match=r"s\.pha.*start at 0.*start at 1"):
        read_pha(p)


def test_arf_with_full_matrix_warns(tmp_path, small_response):
    # CAL/GEN/92-002a: HDUCLAS3 = 'FULL' marks a matrix that includes the
    # effective area; multiplying in an ARF as well counts the area twice.
    write_rmf(tmp_path / "full.rsp", small_response, include_area=True)
    write_arf(tmp_path / "a.arf", small_response.energy_lo, small_response.energy_hi,
              small_response.specresp)
    with pytest.warns(errors.InputWarning, match="full.rsp.*FULL"):
        read_response(tmp_path / "full.rsp", tmp_path / "a.arf")
