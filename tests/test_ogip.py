"""OGIP file reading and writing.

External references: the OGIP memos OGIP/92-007 (+92-007a) for PHA type I
and II and CAL/GEN/92-002 (+92-002a) for RMF/ARF define the keywords and
columns checked here; files written "independently" are built in these
tests with plain astropy.io.fits, not with edgefit's writers, and the
expected matrices are built densely here (small sizes) as the reference.
"""
from __future__ import annotations

import numpy as np
import pytest
from astropy import units as u
from astropy.io import fits

from edgefit.data import (Spectrum, group_min_counts, group_sum, load_spectrum, read_arf,
                          read_pha, read_pha_rows, read_rmf, simulate_spectrum, write_arf,
                          write_pha, write_rmf)
from edgefit.data.grouping import group_bounds, grouping_matrix
from edgefit.errors import MissingRowError


# ---------------------------------------------------------------------------
# helpers writing files with plain astropy (independent of edgefit's writers)
def _write_rmf_by_hand(path, energy_edges, ebounds, rows, first_chan, vla=True):
    """rows: list (per energy bin) of lists of (f_chan, [values...]) groups."""
    n_en = len(energy_edges) - 1
    ngrp = np.array([len(r) for r in rows], np.int16)
    if vla:
        fch = np.array([np.array([g[0] for g in r], np.int32) for r in rows] + [None],
                       dtype=object)[:-1]
        nch = np.array([np.array([len(g[1]) for g in r], np.int32) for r in rows] + [None],
                       dtype=object)[:-1]
        mat = np.array([np.array([v for g in r for v in g[1]], np.float32) for r in rows]
                       + [None], dtype=object)[:-1]
        cols = [fits.Column("F_CHAN", "PJ()", array=fch), fits.Column("N_CHAN", "PJ()", array=nch),
                fits.Column("MATRIX", "PE()", array=mat)]
    else:  # fixed-length vectors padded with zeros
        gmax = max(1, ngrp.max())
        width = max(1, max(sum(len(g[1]) for g in r) for r in rows))
        fch = np.zeros((n_en, gmax), np.int32)
        nch = np.zeros((n_en, gmax), np.int32)
        mat = np.zeros((n_en, width), np.float32)
        for i, r in enumerate(rows):
            vals = [v for g in r for v in g[1]]
            mat[i, :len(vals)] = vals
            for j, g in enumerate(r):
                fch[i, j], nch[i, j] = g[0], len(g[1])
        cols = [fits.Column("F_CHAN", f"{gmax}J", array=fch),
                fits.Column("N_CHAN", f"{gmax}J", array=nch),
                fits.Column("MATRIX", f"{width}E", array=mat)]
    cols = [fits.Column("ENERG_LO", "E", array=energy_edges[:-1]),
            fits.Column("ENERG_HI", "E", array=energy_edges[1:]),
            fits.Column("N_GRP", "I", array=ngrp)] + cols
    m = fits.BinTableHDU.from_columns(cols, name="MATRIX")
    m.header["HDUCLASS"] = "OGIP"
    m.header["HDUCLAS1"] = "RESPONSE"
    m.header["HDUCLAS2"] = "RSP_MATRIX"
    m.header["DETCHANS"] = len(ebounds[0])
    m.header["TLMIN4"] = first_chan  # F_CHAN is column 4
    e = fits.BinTableHDU.from_columns(
        [fits.Column("CHANNEL", "J", array=np.arange(len(ebounds[0])) + first_chan),
         fits.Column("E_MIN", "E", array=ebounds[0]), fits.Column("E_MAX", "E", array=ebounds[1])],
        name="EBOUNDS")
    fits.HDUList([fits.PrimaryHDU(), m, e]).writeto(path)


def _dense_from_rows(rows, n_chan, n_en, first_chan):
    dense = np.zeros((n_chan, n_en))
    for i, r in enumerate(rows):
        for f, vals in r:
            dense[f - first_chan:f - first_chan + len(vals), i] = vals
    return dense


@pytest.fixture
def ragged_rows():
    """An RMF of 6 channels x 5 energy bins with 0, 1 and 2 groups per row."""
    return [[], [(0, [0.5, 0.25])], [(1, [0.1]), (3, [0.3, 0.2, 0.1])], [(5, [0.9])],
            [(0, [0.05]), (2, [0.6, 0.3])]]


@pytest.mark.parametrize("vla", [True, False])
@pytest.mark.parametrize("first_chan", [0, 1])
def test_rmf_written_by_hand(tmp_path, ragged_rows, vla, first_chan):
    # CAL/GEN/92-002: F_CHAN counts from TLMIN of the F_CHAN column (0 or 1).
    rows = [[(f + first_chan, v) for f, v in r] for r in ragged_rows]
    edges = np.array([1.0, 1.1, 1.2, 1.3, 1.4, 1.5])
    eb = (np.linspace(1.0, 1.5, 7)[:-1], np.linspace(1.0, 1.5, 7)[1:])
    path = tmp_path / "hand.rmf"
    _write_rmf_by_hand(path, edges, eb, rows, first_chan, vla=vla)
    r = read_rmf(path)
    expected = _dense_from_rows(rows, 6, 5, first_chan)
    # values stored as float32 (format E): agree to float32 precision
    np.testing.assert_allclose(r.rmf.toarray(), expected, rtol=1e-7, atol=1e-8)
    assert r.channels[0] == first_chan
    assert r.rmf.nnz == np.count_nonzero(expected)
    np.testing.assert_allclose(r.energy_lo, edges[:-1], rtol=1e-7)


def test_rmf_round_trip(tmp_path, small_response):
    path = tmp_path / "rt.rmf"
    write_rmf(path, small_response)
    back = read_rmf(path)
    # MATRIX is written as 32-bit floats (format PE): relative precision 6e-8
    diff = abs(back.rmf - small_response.rmf).max()
    assert diff <= 1e-7 * abs(small_response.rmf).max()
    np.testing.assert_array_equal(back.channels, small_response.channels)
    np.testing.assert_array_equal(back.channel_emin, small_response.channel_emin)
    np.testing.assert_array_equal(back.energy_hi, small_response.energy_hi)
    with fits.open(path) as h:  # OGIP keywords of CAL/GEN/92-002
        m = h["MATRIX"].header
        assert (m["HDUCLASS"], m["HDUCLAS1"], m["HDUCLAS2"]) == ("OGIP", "RESPONSE", "RSP_MATRIX")
        assert m["DETCHANS"] == small_response.n_channels
        assert m["CHANTYPE"] == "PI" and "HDUVERS" in m
        assert m["TFORM6"].startswith("PE")  # MATRIX as a variable-length array
        assert h["EBOUNDS"].header["HDUCLAS2"] == "EBOUNDS"


def test_rsp_with_area_round_trip(tmp_path, small_response):
    path = tmp_path / "full.rsp"
    write_rmf(path, small_response, include_area=True)
    back = read_rmf(path)
    diff = abs(back.matrix() - small_response.matrix()).max()
    assert diff <= 1e-7 * abs(small_response.matrix()).max()
    with fits.open(path) as h:
        assert h[1].name == "SPECRESP MATRIX" and h[1].header["HDUCLAS3"] == "FULL"


def test_arf_round_trip_and_by_hand(tmp_path):
    lo = np.linspace(0.5, 2.0, 51)[:-1]
    hi = np.linspace(0.5, 2.0, 51)[1:]
    area = 100.0 * lo
    write_arf(tmp_path / "a.arf", lo, hi, area)
    a = read_arf(tmp_path / "a.arf")
    np.testing.assert_array_equal(a.energy_lo, lo)
    np.testing.assert_allclose(a.specresp, area, rtol=1e-7)  # SPECRESP stored as format E
    # a file written by hand, energies in eV (TUNIT) -> converted to keV
    cols = [fits.Column("ENERG_LO", "D", unit="eV", array=lo * 1e3),
            fits.Column("ENERG_HI", "D", unit="eV", array=hi * 1e3),
            fits.Column("SPECRESP", "D", unit="cm**2", array=area)]
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols, name="SPECRESP")]
                 ).writeto(tmp_path / "b.arf")
    b = read_arf(tmp_path / "b.arf")
    np.testing.assert_allclose(b.energy_hi, hi, rtol=1e-14)
    np.testing.assert_array_equal(b.specresp, area)


def test_pha1_round_trip(tmp_path, small_response, response_files):
    rmf, arf = response_files
    flux = np.full(small_response.n_energies, 2e-3)
    spec = simulate_spectrum(flux, small_response, 5e3, 42, meta={"object": "simulated-src"})
    spec.quality[:3] = 1
    spec.grouping = group_min_counts(spec.counts, 50)
    write_pha(tmp_path / "s.pha", spec, respfile=rmf.name, ancrfile=arf.name)
    back = read_pha(tmp_path / "s.pha")
    np.testing.assert_array_equal(back.counts, spec.counts)
    np.testing.assert_array_equal(back.quality, spec.quality)
    np.testing.assert_array_equal(back.grouping, spec.grouping)
    np.testing.assert_array_equal(back.channels, small_response.channels)
    assert back.exposure == 5e3 and back.meta["simulated"] and back.poisson
    assert back.response is not None and back.response.arf_path.endswith("sim.arf")
    np.testing.assert_allclose(back.response.specresp, small_response.specresp, rtol=1e-7)
    with fits.open(tmp_path / "s.pha") as h:  # OGIP/92-007 mandatory keywords
        hd = h["SPECTRUM"].header
        assert (hd["HDUCLASS"], hd["HDUCLAS1"], hd["HDUCLAS3"]) == ("OGIP", "SPECTRUM", "COUNT")
        assert hd["HDUCLAS4"] == "TYPE:I" and hd["POISSERR"] is True
        assert hd["DETCHANS"] == small_response.n_channels
        assert (hd["TLMIN1"], hd["TLMAX1"]) == (1, small_response.n_channels)
        for key in ("EXPOSURE", "BACKSCAL", "AREASCAL", "CHANTYPE", "HDUVERS", "RESPFILE",
                    "ANCRFILE", "BACKFILE", "CORRFILE", "CORRSCAL", "TELESCOP", "INSTRUME"):
            assert key in hd, key


def test_pha2_several_orders_round_trip(tmp_path, small_response, response_files):
    rmf, arf = response_files
    flux = np.full(small_response.n_energies, 1e-3)
    specs = []
    for k, (order, arm) in enumerate([(-1, 1), (1, 1), (-1, 2), (1, 2)]):
        specs.append(simulate_spectrum(flux, small_response, 1e4 + k, 100 + k,
                                       meta={"order": order, "arm": arm}))
    write_pha(tmp_path / "s2.pha", specs, respfile=rmf.name, ancrfile=arf.name)
    rows = read_pha_rows(tmp_path / "s2.pha")
    assert len(rows) == 4
    for a, b in zip(specs, rows):
        np.testing.assert_array_equal(a.counts, b.counts)
        assert (b.meta["order"], b.meta["arm"], b.exposure) == (a.meta["order"], a.meta["arm"],
                                                               a.exposure)
        assert b.response is rows[0].response  # one response shared by all rows
    one = read_pha(tmp_path / "s2.pha", order=1, arm=2)
    np.testing.assert_array_equal(one.counts, specs[3].counts)
    assert read_pha(tmp_path / "s2.pha", row=2).meta["order"] == -1
    with pytest.raises(MissingRowError):
        read_pha(tmp_path / "s2.pha", order=2)
    with pytest.raises(MissingRowError):  # several match: must choose
        read_pha(tmp_path / "s2.pha", order=1)
    with fits.open(tmp_path / "s2.pha") as h:
        assert h[1].header["HDUCLAS4"] == "TYPE:II"
        assert h[1].data["COUNTS"].shape == (4, small_response.n_channels)


def test_pha2_by_hand_with_two_sided_background(tmp_path):
    """Type II grating convention: BACKGROUND_UP/DOWN with BACKSCUP/BACKSCDN,
    a RATE-free COUNTS vector, TG_M/TG_PART columns, EXPOSURE keyword."""
    rng = np.random.default_rng(7)
    nrow, nch = 3, 50
    counts = rng.poisson(20.0, (nrow, nch)).astype(np.int32)
    up = rng.poisson(2.0, (nrow, nch)).astype(np.int32)
    down = rng.poisson(3.0, (nrow, nch)).astype(np.int32)
    cols = [fits.Column("TG_M", "I", array=np.array([-1, 1, 2], np.int16)),
            fits.Column("TG_PART", "I", array=np.array([2, 2, 2], np.int16)),
            fits.Column("CHANNEL", f"{nch}I", array=np.tile(np.arange(1, nch + 1), (nrow, 1))),
            fits.Column("COUNTS", f"{nch}J", array=counts),
            fits.Column("BACKGROUND_UP", f"{nch}J", array=up),
            fits.Column("BACKGROUND_DOWN", f"{nch}J", array=down),
            fits.Column("BACKSCUP", "E", array=np.array([4.0, 4.5, 5.0])),
            fits.Column("BACKSCDN", "E", array=np.array([5.0, 5.5, 6.0]))]
    hdu = fits.BinTableHDU.from_columns(cols, name="SPECTRUM")
    hdu.header.update({"HDUCLASS": "OGIP", "HDUCLAS1": "SPECTRUM", "HDUCLAS4": "TYPE:II",
                       "EXPOSURE": 2.5e4, "BACKSCAL": 1.0, "POISSERR": True})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(tmp_path / "hand2.pha")
    s = read_pha(tmp_path / "hand2.pha", order=1)
    np.testing.assert_array_equal(s.counts, counts[1])
    np.testing.assert_array_equal(s.background.counts, up[1] + down[1])
    assert s.background.backscal == pytest.approx(10.0)   # 4.5 + 5.5
    assert s.background_scale() == pytest.approx(0.1)     # BACKSCAL 1 / (4.5 + 5.5)
    assert s.exposure == 2.5e4 and s.meta["arm"] == 2


def test_pha1_rate_stat_err_areascal_by_hand(tmp_path):
    """RATE column (counts/s) is converted with EXPOSURE; STAT_ERR too;
    AREASCAL as a column; BACKFILE names a background next to the file."""
    nch = 40
    rate = np.linspace(0.1, 0.5, nch)
    cols = [fits.Column("CHANNEL", "J", array=np.arange(nch)),
            fits.Column("RATE", "E", array=rate),
            fits.Column("STAT_ERR", "E", array=np.sqrt(rate / 100.0)),
            fits.Column("AREASCAL", "E", array=np.full(nch, 0.9))]
    hdu = fits.BinTableHDU.from_columns(cols, name="SPECTRUM")
    hdu.header.update({"HDUCLAS1": "SPECTRUM", "EXPOSURE": 100.0, "BACKSCAL": 2.0,
                       "POISSERR": False, "TLMIN1": 0, "BACKFILE": "bg.pha"})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(tmp_path / "rate.pha")
    bcols = [fits.Column("CHANNEL", "J", array=np.arange(nch)),
             fits.Column("COUNTS", "J", array=np.full(nch, 3, np.int32))]
    bh = fits.BinTableHDU.from_columns(bcols, name="SPECTRUM")
    bh.header.update({"HDUCLAS1": "SPECTRUM", "EXPOSURE": 200.0, "BACKSCAL": 8.0})
    fits.HDUList([fits.PrimaryHDU(), bh]).writeto(tmp_path / "bg.pha")
    s = read_pha(tmp_path / "rate.pha")
    np.testing.assert_allclose(s.counts, rate.astype(np.float32).astype(float) * 100.0,
                               rtol=1e-12)
    np.testing.assert_allclose(s.stat_err, np.sqrt(rate / 100.0) * 100.0, rtol=1e-6)
    np.testing.assert_allclose(s.areascal, 0.9, rtol=1e-7)
    assert s.channels[0] == 0 and not s.poisson
    # (t_s BACKSCAL_s AREASCAL_s) / (t_b BACKSCAL_b) = 100*2*0.9 / (200*8)
    np.testing.assert_allclose(s.background_scale(), 100 * 2 * 0.9 / 1600, rtol=1e-6)


def test_load_spectrum_explicit_files(tmp_path, small_response, response_files):
    rmf, arf = response_files
    spec = simulate_spectrum(np.full(small_response.n_energies, 1e-3), small_response, 1e3, 3)
    write_pha(tmp_path / "x.pha", spec)          # no RESPFILE recorded
    assert read_pha(tmp_path / "x.pha").response is None
    s = load_spectrum(tmp_path / "x.pha", rmf=rmf, arf=arf)
    np.testing.assert_allclose(s.response.fold(np.ones(small_response.n_energies)),
                               small_response.fold(np.ones(small_response.n_energies)),
                               rtol=2e-7)


def test_select_ranges_in_kev_angstrom_and_quantities(small_response):
    spec = Spectrum(np.ones(small_response.n_channels), 1.0, small_response.channels,
                    response=small_response)
    by_kev = spec.select(1.8, 1.9)
    hc = 12.398419843320026  # keV Angstrom (CODATA 2018)
    by_a = spec.select(hc / 1.9, hc / 1.8, unit="angstrom")
    by_q = spec.select((hc / 1.8) * u.AA, 1.9 * u.keV)
    np.testing.assert_array_equal(by_kev, by_a)
    np.testing.assert_array_equal(by_kev, by_q)
    mid = small_response.channel_mid
    assert np.all((mid[by_kev] >= 1.8) & (mid[by_kev] <= 1.9))
    assert not np.any((mid[~by_kev] > 1.8) & (mid[~by_kev] < 1.9))
    # 300 channels over 0.5 keV -> 0.1 keV holds 60 channel centres
    assert by_kev.sum() == 60


def test_grouping_min_counts_worked_example():
    # hand-worked: counts 3,1,1,4,0,0,2,5,1 with min 4 ->
    # groups [3,1] [1,4] [0,0,2,5] [1 -> merged into previous]
    counts = np.array([3, 1, 1, 4, 0, 0, 2, 5, 1])
    g = group_min_counts(counts, 4)
    np.testing.assert_array_equal(g, [1, -1, 1, -1, 1, -1, -1, -1, -1])
    np.testing.assert_array_equal(group_sum(counts, g), [4, 5, 8])
    np.testing.assert_array_equal(grouping_matrix(g) @ counts, [4, 5, 8])
    lo, hi = group_bounds(np.arange(9.0), np.arange(9.0) + 1, g)
    np.testing.assert_array_equal(lo, [0, 2, 4])
    np.testing.assert_array_equal(hi, [2, 4, 9])
    # bad channels are never merged
    q = np.zeros(9, int)
    q[2] = 1
    g2 = group_min_counts(counts, 4, quality=q)
    assert g2[2] == 1 and g2[3] == 1


def test_grouping_random_spectrum_meets_minimum():
    rng = np.random.default_rng(11)
    counts = rng.poisson(1.3, 500)
    g = group_min_counts(counts, 20)
    sums = group_sum(counts, g)
    assert np.all(sums >= 20)
    assert sums.sum() == counts.sum()


def test_write_dataset_with_backgrounds_round_trip(tmp_path, small_response):
    """Simulated PHA II (two orders) with backgrounds: the PHA's BACKFILE
    (type II background, same orders) and RESPFILE/ANCRFILE are re-attached."""
    from edgefit.data import write_dataset
    flux = np.full(small_response.n_energies, 1e-3)
    bkg_rate = np.full(small_response.n_channels, 2e-3)
    specs = [simulate_spectrum(flux, small_response, 1e4, 50 + k, background_rate=bkg_rate,
                               background_backscal=5.0, meta={"order": o, "arm": 1})
             for k, o in enumerate((-1, 1))]
    paths = write_dataset(tmp_path / "set", "simsrc", specs, small_response)
    with fits.open(paths["bkg"]) as h:
        assert h[1].header["HDUCLAS2"] == "BKG"
    back = read_pha(paths["pha"], order=1)
    np.testing.assert_array_equal(back.counts, specs[1].counts)
    np.testing.assert_array_equal(back.background.counts, specs[1].background.counts)
    assert back.background_scale() == pytest.approx(0.2)   # BACKSCAL 1 / 5
    assert back.response.n_channels == small_response.n_channels
