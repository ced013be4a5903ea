"""Readers catch the malformed OGIP files that would otherwise pass in
silence: CHANNEL out of order or repeated, DETCHANS disagreeing with the
rows, BACKSCAL/AREASCAL <= 0, a spectrum found only by HDUCLAS1, and
energy columns in an unknown unit.

Every file here is written with plain astropy.io.fits following the
layouts of OGIP/92-007 (spectra; Arnaud, George & Tennant 1992, from
memory) and CAL/GEN/92-002 (responses; George et al. 1992, from memory),
not with edgefit's writers, so the readers are checked against the standard's
layout rather than against themselves.  Each warning and error must name
the file and the keyword at fault.  No physics or statistics value is
checked here.
"""
from __future__ import annotations

import numpy as np
import pytest
from astropy.io import fits

from edgefit import errors
from edgefit.data import load_spectrum, read_arf, read_pha, read_pha_rows, read_rmf

N_CHAN = 24
E_LO = np.linspace(1.0, 2.0, 2 * N_CHAN + 1)


def _write_rmf(path, *, first=1, tunit="keV", eb_unit="keV", detchans=N_CHAN):
    """Redistribution matrix mapping energy bins 2k and 2k+1 to channel
    first + k (N_GRP = 1, scalar F_CHAN/N_CHAN/MATRIX), and EBOUNDS."""
    n_en = E_LO.size - 1
    chan = np.arange(n_en) // 2 + first
    scale = {"keV": 1.0, "eV": 1e3}.get(tunit, 1.0)
    cols = [fits.Column("ENERG_LO", "E", unit=tunit, array=E_LO[:-1] * scale),
            fits.Column("ENERG_HI", "E", unit=tunit, array=E_LO[1:] * scale),
            fits.Column("N_GRP", "I", array=np.ones(n_en)),
            fits.Column("F_CHAN", "I", array=chan),
            fits.Column("N_CHAN", "I", array=np.ones(n_en)),
            fits.Column("MATRIX", "E", array=np.ones(n_en))]
    m = fits.BinTableHDU.from_columns(cols, name="MATRIX")
    m.header["TLMIN4"] = first
    m.header["DETCHANS"] = N_CHAN
    m.header["HDUCLASS"], m.header["HDUCLAS1"], m.header["HDUCLAS2"] = (
        "OGIP", "RESPONSE", "RSP_MATRIX")
    ebs = 1.0 if eb_unit == "keV" else 1e3
    e = fits.BinTableHDU.from_columns([
        fits.Column("CHANNEL", "J", array=np.arange(N_CHAN) + first),
        fits.Column("E_MIN", "E", unit=eb_unit, array=E_LO[:-1:2] * ebs),
        fits.Column("E_MAX", "E", unit=eb_unit, array=E_LO[2::2] * ebs)], name="EBOUNDS")
    e.header["DETCHANS"] = detchans
    fits.HDUList([fits.PrimaryHDU(), m, e]).writeto(path)
    return path


def _write_pha(path, channels, counts, *, extname="SPECTRUM", columns=(), **keywords):
    """Type I PHA: CHANNEL and COUNTS columns (rows in the order given),
    EXPOSURE 1000 s, BACKSCAL/AREASCAL 1 unless overridden."""
    cols = [fits.Column("CHANNEL", "J", array=np.asarray(channels)),
            fits.Column("COUNTS", "J", array=np.asarray(counts))] + list(columns)
    h = fits.BinTableHDU.from_columns(cols, name=extname)
    head = {"HDUCLASS": "OGIP", "HDUCLAS1": "SPECTRUM", "HDUCLAS2": "TOTAL",
            "HDUCLAS3": "COUNT", "EXPOSURE": 1000.0, "BACKSCAL": 1.0, "AREASCAL": 1.0,
            "POISSERR": True, "DETCHANS": len(channels)}
    head.update(keywords)
    for key, val in head.items():
        if val is not None:
            h.header[key] = val
    fits.HDUList([fits.PrimaryHDU(), h]).writeto(path)
    return path


def _named(exc_or_warning, path, keyword):
    text = str(exc_or_warning)
    assert str(path) in text, text
    assert keyword in text, text


CHANNELS = np.arange(1, N_CHAN + 1)
COUNTS = 7 * CHANNELS + (CHANNELS % 5) ** 2      # distinct per channel


def test_reversed_channel_column_reaches_the_same_response_rows(tmp_path):
    rmf = _write_rmf(tmp_path / "r.rmf")
    ordered = _write_pha(tmp_path / "ordered.pha", CHANNELS, COUNTS, RESPFILE="r.rmf")
    reverse = _write_pha(tmp_path / "reversed.pha", CHANNELS[::-1], COUNTS[::-1],
                         RESPFILE="r.rmf")
    a = read_pha(ordered)
    with pytest.warns(errors.InputWarning) as rec:
        b = read_pha(reverse)
    _named(rec[0].message, reverse, "CHANNEL")
    assert b.response is not None and rmf.name in b.response.rmf_path
    # per response row i (channel resp.channels[i], energies channel_emin[i]..),
    # the count is the one the file lists for that CHANNEL number
    in_file = dict(zip(CHANNELS[::-1].tolist(), COUNTS[::-1].tolist()))
    resp = b.response
    np.testing.assert_array_equal(b.channels, resp.channels)
    np.testing.assert_array_equal(b.counts, [in_file[c] for c in resp.channels])
    np.testing.assert_array_equal(b.counts, a.counts)
    np.testing.assert_array_equal(b.channels, a.channels)
    # the energy of the channel holding channel 5's count is the EBOUNDS
    # bin written for channel 5: 1.0 + 4 * (1 / 24) keV
    i = int(np.flatnonzero(b.channels == 5)[0])
    assert resp.channel_emin[i] == pytest.approx(1.0 + 4 * 1.0 / N_CHAN, rel=1e-6)
    assert b.counts[i] == COUNTS[4]


def test_shuffled_channels_sort_every_per_channel_column(tmp_path):
    perm = np.random.default_rng(3).permutation(N_CHAN)
    quality = (CHANNELS % 7 == 0).astype(int)
    grouping = np.where(CHANNELS % 2 == 1, 1, -1)
    stat_err = np.sqrt(COUNTS) + 0.5
    cols = [fits.Column("QUALITY", "I", array=quality[perm]),
            fits.Column("GROUPING", "I", array=grouping[perm]),
            fits.Column("STAT_ERR", "E", array=stat_err[perm])]
    p = _write_pha(tmp_path / "shuffled.pha", CHANNELS[perm], COUNTS[perm], columns=cols)
    with pytest.warns(errors.InputWarning, match="CHANNEL"):
        s = read_pha(p)
    np.testing.assert_array_equal(s.channels, CHANNELS)
    np.testing.assert_array_equal(s.counts, COUNTS)
    np.testing.assert_array_equal(s.quality, quality)
    np.testing.assert_array_equal(s.grouping, grouping)
    np.testing.assert_allclose(s.stat_err, stat_err.astype(np.float32), rtol=0)


def test_duplicated_channel_is_refused(tmp_path):
    ch = CHANNELS.copy()
    ch[10] = ch[9]
    p = _write_pha(tmp_path / "dup.pha", ch, COUNTS)
    with pytest.raises(errors.BadChannelsError) as exc:
        read_pha(p)
    _named(exc.value, p, "CHANNEL")
    assert isinstance(exc.value, errors.InputFileError)


def test_detchans_disagreeing_with_rows_warns(tmp_path):
    p = _write_pha(tmp_path / "det.pha", CHANNELS, COUNTS, DETCHANS=N_CHAN + 8)
    with pytest.warns(errors.InputWarning) as rec:
        s = read_pha(p)
    _named(rec[0].message, p, "DETCHANS")
    assert s.n_channels == N_CHAN
    # and in an RMF's EBOUNDS extension
    r = _write_rmf(tmp_path / "det.rmf", detchans=N_CHAN - 1)
    with pytest.warns(errors.InputWarning) as rec:
        read_rmf(r)
    _named(rec[0].message, r, "DETCHANS")


def test_backscal_zero_refused_with_background_warns_without(tmp_path):
    _write_pha(tmp_path / "bkg.pha", CHANNELS, np.ones(N_CHAN, int), BACKSCAL=4.0,
               HDUCLAS2="BKG")
    p = _write_pha(tmp_path / "src.pha", CHANNELS, COUNTS, BACKSCAL=0.0, BACKFILE="bkg.pha")
    with pytest.raises(errors.BadScalingError) as exc:
        read_pha(p)
    _named(exc.value, p, "BACKSCAL")
    q = _write_pha(tmp_path / "alone.pha", CHANNELS, COUNTS, BACKSCAL=0.0)
    with pytest.warns(errors.InputWarning) as rec:
        s = read_pha(q)
    _named(rec[0].message, q, "BACKSCAL")
    assert s.background is None
    # a background given explicitly is refused the same way
    with pytest.raises(errors.BadScalingError, match="BACKSCAL"):
        load_spectrum(q, background=tmp_path / "bkg.pha")


def test_areascal_negative_refused_with_background_warns_without(tmp_path):
    _write_pha(tmp_path / "bkg.pha", CHANNELS, np.ones(N_CHAN, int), HDUCLAS2="BKG")
    p = _write_pha(tmp_path / "src.pha", CHANNELS, COUNTS, AREASCAL=-1.0, BACKFILE="bkg.pha")
    with pytest.raises(errors.BadScalingError) as exc:
        read_pha(p)
    _named(exc.value, p, "AREASCAL")
    q = _write_pha(tmp_path / "alone.pha", CHANNELS, COUNTS, AREASCAL=-1.0)
    with pytest.warns(errors.InputWarning) as rec:
        read_pha_rows(q)
    _named(rec[0].message, q, "AREASCAL")


def test_background_with_zero_backscal_is_refused(tmp_path):
    b = _write_pha(tmp_path / "bkg.pha", CHANNELS, np.ones(N_CHAN, int), BACKSCAL=0.0,
                   HDUCLAS2="BKG")
    p = _write_pha(tmp_path / "src.pha", CHANNELS, COUNTS, BACKFILE="bkg.pha")
    with pytest.raises(errors.BadScalingError) as exc:
        read_pha(p)
    _named(exc.value, b, "BACKSCAL")


def test_spectrum_found_by_hduclas1_under_another_name_warns(tmp_path):
    p = _write_pha(tmp_path / "renamed.pha", CHANNELS, COUNTS, extname="COUNTS_TABLE")
    with pytest.warns(errors.InputWarning) as rec:
        s = read_pha(p)
    _named(rec[0].message, p, "HDUCLAS1")
    assert "COUNTS_TABLE" in str(rec[0].message)
    np.testing.assert_array_equal(s.counts, COUNTS)
    # no extension at all that is a spectrum: refused
    q = _write_pha(tmp_path / "nothing.pha", CHANNELS, COUNTS, extname="OTHER",
                   HDUCLAS1="EVENTS")
    with pytest.raises(errors.MissingExtensionError):
        read_pha(q)


@pytest.mark.parametrize("unit", ["Angstrom", "channel", "kev/s"])
def test_unknown_energy_unit_is_an_error(tmp_path, unit):
    p = _write_rmf(tmp_path / "u.rmf", tunit=unit)
    with pytest.raises(errors.BadUnitError) as exc:
        read_rmf(p)
    _named(exc.value, p, "TUNIT1")
    assert "ENERG_LO" in str(exc.value) and unit in str(exc.value)
    q = _write_rmf(tmp_path / "eb.rmf", eb_unit=unit)
    with pytest.raises(errors.BadUnitError, match="E_MIN") as exc:
        read_rmf(q)
    _named(exc.value, q, "TUNIT")


def test_energy_columns_in_ev_are_converted(tmp_path):
    # eV is a known unit: the grid is the keV one divided by 1000 (definition)
    a = read_rmf(_write_rmf(tmp_path / "kev.rmf"))
    b = read_rmf(_write_rmf(tmp_path / "ev.rmf", tunit="eV", eb_unit="eV"))
    np.testing.assert_allclose(b.energy_lo, a.energy_lo, rtol=1e-6)
    np.testing.assert_allclose(b.channel_emax, a.channel_emax, rtol=1e-6)


def test_arf_with_unknown_unit(tmp_path):
    cols = [fits.Column("ENERG_LO", "E", unit="nm", array=E_LO[:-1]),
            fits.Column("ENERG_HI", "E", unit="nm", array=E_LO[1:]),
            fits.Column("SPECRESP", "E", unit="cm**2", array=np.full(E_LO.size - 1, 10.0))]
    p = tmp_path / "a.arf"
    fits.HDUList([fits.PrimaryHDU(),
                  fits.BinTableHDU.from_columns(cols, name="SPECRESP")]).writeto(p)
    with pytest.raises(errors.BadUnitError) as exc:
        read_arf(p)
    _named(exc.value, p, "TUNIT1")
