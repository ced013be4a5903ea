"""Fuzzing the readers: mutated valid files give edgefit's errors or
warnings, never another exception type.

Property-based tests (hypothesis, seeded and derandomized so every run
checks the same inputs) start from valid files -- OGIP PHA type I and II,
ARF and RMF written with plain astropy.io.fits, plain-text tables, the
example TOML sightline -- and mutate them: columns and keywords dropped,
values replaced by other types, NaN, infinities, negative and huge
numbers, files truncated, bytes overwritten or inserted.  Whatever the
reader makes of it, only three outcomes are allowed: a result, an
:class:`~edgefit.errors.EdgefitError`, or warnings that are
:class:`~edgefit.errors.EdgefitWarning` (numpy's RuntimeWarnings and
astropy's own warnings count as failures: the reader must have checked
first).  A hang would show as a hypothesis deadline error (10 s).

Each reader gets 300 examples (PHA types I and II share one test).  To see
every foreign outcome at once instead of the first, set the environment
variable FUZZ_COLLECT to a file name: they are appended there.
"""
from __future__ import annotations

import functools
import io
import os
import tempfile
import warnings
from datetime import timedelta
from pathlib import Path

import numpy as np
import pytest
from astropy.io import fits

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, Phase, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from edgefit.config import load_config  # noqa: E402
from edgefit.data import read_arf, read_pha_rows, read_rmf  # noqa: E402
from edgefit.dust.optical import read_lab_absorption  # noqa: E402
from edgefit.dust.sizes import read_size_table  # noqa: E402
from edgefit.errors import EdgefitError, EdgefitWarning  # noqa: E402

EXAMPLES = 300
# no shrinking: a failure is reported with the draws that produced it (the
# mutations are short lists, readable as they are), and shrinking a FITS
# mutation can take minutes
FUZZ = settings(max_examples=EXAMPLES, derandomize=True, database=None,
                deadline=timedelta(seconds=10), print_blob=True,
                phases=(Phase.explicit, Phase.reuse, Phase.generate),
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
REPO = Path(__file__).resolve().parent.parent


def _only_edgefit_outcomes(call):
    """Run ``call``; fail on any exception that is not an EdgefitError and
    on any warning that is not an EdgefitWarning."""
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        try:
            call()
        except EdgefitError:
            pass
        except Exception as exc:
            if os.environ.get("FUZZ_COLLECT"):
                import traceback
                with open(os.environ["FUZZ_COLLECT"], "a") as fh:
                    tb = traceback.extract_tb(exc.__traceback__)[-1]
                    fh.write(f"{type(exc).__name__}: {str(exc)[:100]} @ {tb.filename}:"
                             f"{tb.lineno}\n")
                return
            raise
    foreign = [f"{w.category.__name__}: {w.message} @ {w.filename}:{w.lineno}" for w in rec
               if not issubclass(w.category, EdgefitWarning)]
    if foreign and os.environ.get("FUZZ_COLLECT"):
        with open(os.environ["FUZZ_COLLECT"], "a") as fh:
            fh.write("".join(f + "\n" for f in foreign))
        return
    assert not foreign, foreign


# -- valid starting files (OGIP/92-007, CAL/GEN/92-002 layouts) -------------
N_CHAN, N_EN = 16, 32
E_EDGES = np.linspace(1.0, 2.0, N_EN + 1)


def _pha_type1():
    ch = np.arange(1, N_CHAN + 1)
    h = fits.BinTableHDU.from_columns([
        fits.Column("CHANNEL", "J", array=ch),
        fits.Column("COUNTS", "J", array=(ch * 3) % 11),
        fits.Column("QUALITY", "I", array=np.zeros(N_CHAN)),
        fits.Column("GROUPING", "I", array=np.ones(N_CHAN))], name="SPECTRUM")
    for k, v in {"HDUCLASS": "OGIP", "HDUCLAS1": "SPECTRUM", "HDUCLAS2": "TOTAL",
                 "HDUCLAS3": "COUNT", "EXPOSURE": 1500.0, "BACKSCAL": 1.0, "AREASCAL": 1.0,
                 "DETCHANS": N_CHAN, "POISSERR": True, "TLMIN1": 1}.items():
        h.header[k] = v
    return fits.HDUList([fits.PrimaryHDU(), h])


def _pha_type2():
    ch = np.tile(np.arange(1, N_CHAN + 1), (2, 1))
    cols = [fits.Column("SPEC_NUM", "I", array=[1, 2]),
            fits.Column("TG_M", "I", array=[-1, 1]),
            fits.Column("CHANNEL", f"{N_CHAN}J", array=ch),
            fits.Column("COUNTS", f"{N_CHAN}J", array=(ch * 5) % 7),
            fits.Column("BACKGROUND_UP", f"{N_CHAN}E", array=np.ones((2, N_CHAN))),
            fits.Column("BACKGROUND_DOWN", f"{N_CHAN}E", array=np.ones((2, N_CHAN))),
            fits.Column("EXPOSURE", "E", array=[1000.0, 1100.0]),
            fits.Column("BACKSCUP", "E", array=[4.0, 4.0]),
            fits.Column("BACKSCDN", "E", array=[4.0, 4.0])]
    h = fits.BinTableHDU.from_columns(cols, name="SPECTRUM")
    for k, v in {"HDUCLASS": "OGIP", "HDUCLAS1": "SPECTRUM", "HDUCLAS2": "TOTAL",
                 "HDUCLAS3": "COUNT", "HDUCLAS4": "TYPE:II", "BACKSCAL": 1.0,
                 "DETCHANS": N_CHAN}.items():
        h.header[k] = v
    return fits.HDUList([fits.PrimaryHDU(), h])


def _arf():
    h = fits.BinTableHDU.from_columns([
        fits.Column("ENERG_LO", "E", unit="keV", array=E_EDGES[:-1]),
        fits.Column("ENERG_HI", "E", unit="keV", array=E_EDGES[1:]),
        fits.Column("SPECRESP", "E", unit="cm**2", array=np.linspace(5, 20, N_EN))],
        name="SPECRESP")
    h.header["HDUCLASS"], h.header["HDUCLAS1"], h.header["HDUCLAS2"] = (
        "OGIP", "RESPONSE", "SPECRESP")
    return fits.HDUList([fits.PrimaryHDU(), h])


def _rmf():
    # variable-length F_CHAN/N_CHAN/MATRIX rows: one or two groups per row
    n_grp = np.where(np.arange(N_EN) % 3 == 0, 2, 1)
    f_chan, n_chan, matrix = [], [], []
    for i in range(N_EN):
        c = i // 2 + 1
        if n_grp[i] == 2:
            f_chan.append([c, min(c + 2, N_CHAN)])
            n_chan.append([1, 1])
            matrix.append([0.7, 0.3])
        else:
            f_chan.append([c])
            n_chan.append([1])
            matrix.append([1.0])
    m = fits.BinTableHDU.from_columns([
        fits.Column("ENERG_LO", "E", unit="keV", array=E_EDGES[:-1]),
        fits.Column("ENERG_HI", "E", unit="keV", array=E_EDGES[1:]),
        fits.Column("N_GRP", "I", array=n_grp),
        fits.Column("F_CHAN", "PJ()", array=np.array(f_chan, dtype=object)),
        fits.Column("N_CHAN", "PJ()", array=np.array(n_chan, dtype=object)),
        fits.Column("MATRIX", "PE()", array=np.array(matrix, dtype=object))], name="MATRIX")
    m.header["DETCHANS"], m.header["TLMIN4"] = N_CHAN, 1
    m.header["HDUCLASS"], m.header["HDUCLAS1"], m.header["HDUCLAS2"] = (
        "OGIP", "RESPONSE", "RSP_MATRIX")
    edges = E_EDGES[::2]
    e = fits.BinTableHDU.from_columns([
        fits.Column("CHANNEL", "J", array=np.arange(1, N_CHAN + 1)),
        fits.Column("E_MIN", "E", unit="keV", array=edges[:-1]),
        fits.Column("E_MAX", "E", unit="keV", array=edges[1:])], name="EBOUNDS")
    e.header["DETCHANS"] = N_CHAN
    return fits.HDUList([fits.PrimaryHDU(), m, e])


def _as_bytes(hdul):
    buf = io.BytesIO()
    hdul.writeto(buf)
    return buf.getvalue()


BUILDERS = {"pha1": _pha_type1, "pha2": _pha_type2, "arf": _arf, "rmf": _rmf}
VALID = {kind: _as_bytes(build()) for kind, build in BUILDERS.items()}

# -- mutations ----------------------------------------------------------------
ODD_VALUES = st.sampled_from([np.nan, np.inf, -np.inf, -1.0, 0.0, 1e300, -1e300, 1e-300,
                              2 ** 40, "text", "", "NONE", True, "keV", "Angstrom", "eV"])
KEYWORDS = st.sampled_from(["EXPOSURE", "BACKSCAL", "AREASCAL", "DETCHANS", "HDUCLAS1",
                            "HDUCLAS4", "POISSERR", "TLMIN1", "TLMIN4", "TUNIT1", "TUNIT2",
                            "TUNIT3", "EXTNAME", "TFORM1", "TFORM2", "BACKSCUP",
                            "HDUCLAS3", "RESPFILE", "SIMULATD"])


def _structural(hdul, op, idx, pick, value, pos):
    """One structural mutation of table HDU ``idx`` of ``hdul``: drop or
    retype column number ``pick``, set one of its cells to ``value``, or keep
    only ``pos`` rows."""
    hdu = hdul[idx]
    names = list(hdu.columns.names)
    name = names[pick % len(names)]
    if op == "drop_column":
        cols = [c for c in hdu.columns if c.name != name]
        if cols:
            hdul[idx] = fits.BinTableHDU.from_columns(cols, header=hdu.header, name=hdu.name)
    elif op == "retype_column":
        cols = [c if c.name != name else
                fits.Column(name, "8A", array=np.array(["x1"] * len(hdu.data)))
                for c in hdu.columns]
        hdul[idx] = fits.BinTableHDU.from_columns(cols, header=hdu.header, name=hdu.name)
    elif op == "set_value":
        col = hdu.data[name]
        if col.dtype == object or col.size == 0:
            return
        flat = np.array(col).reshape(-1)
        with np.errstate(all="ignore"):
            flat[pos % flat.size] = value
        hdu.data[name] = flat.reshape(np.shape(col))
    elif op == "rows":
        hdul[idx] = fits.BinTableHDU(data=hdu.data[:pos % (len(hdu.data) + 1)],
                                     header=hdu.header, name=hdu.name)


@functools.lru_cache(maxsize=None)
def _variant(kind, op, idx, pick, value, pos):
    """The bytes of valid file ``kind`` after one structural mutation
    (cached: the draws repeat, astropy's table building is the slow part)."""
    hdul = BUILDERS[kind]()
    if op != "none":
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                _structural(hdul, op, idx % (len(hdul) - 1) + 1, pick, value, pos)
                return _as_bytes(hdul)
        except (ValueError, TypeError, KeyError, IndexError, OSError, OverflowError):
            pass
    return VALID[kind]


def _header_edit(raw, op, key, value):
    """Drop (blank) or rewrite every header card of ``key`` in the bytes."""
    card = key.ljust(8).encode()
    if op == "set_keyword":
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                image = fits.Card(key, value).image.encode("ascii")
        except (ValueError, TypeError, UnicodeEncodeError):
            return raw
    else:
        image = b" " * 80
    out = bytearray(raw)
    for start in range(0, len(out) - 79, 80):
        if out[start:start + 8] == card and out[start + 8:start + 10] == b"= ":
            out[start:start + 80] = image[:80].ljust(80)
    return bytes(out)


def _spread(data, lo, hi, label):
    """An integer in [lo, hi) spread over the whole range (hypothesis's own
    integers favour the ends, which would mostly cut the first card)."""
    if hi <= lo:
        return lo
    return lo + data.draw(st.integers(0, 2 ** 31), label=label) % (hi - lo)


def _bytewise(raw, op, data, keep=80):
    """Truncate, overwrite up to 8 bytes or insert up to 200 bytes, past the
    first ``keep`` bytes (the first card) most of the time."""
    lo = 0 if data.draw(st.integers(0, 19), label="anywhere") == 0 else min(keep, len(raw))
    if op == "truncate":
        return raw[:_spread(data, lo, len(raw), "cut at")]
    if op == "overwrite":
        out = bytearray(raw)
        for _ in range(data.draw(st.integers(1, 8), label="bytes")):
            pos = _spread(data, lo, len(out), "position")
            if pos < len(out):
                out[pos] = data.draw(st.integers(0, 255), label="byte")
        return bytes(out)
    if op == "insert":
        pos = _spread(data, lo, len(raw) + 1, "position")
        return raw[:pos] + data.draw(st.binary(min_size=1, max_size=200)) + raw[pos:]
    return raw


STRUCTURAL = ["drop_column", "retype_column", "set_value", "rows", "none"]
HEADER = ["drop_keyword", "set_keyword", "none"]
BYTEWISE = ["truncate", "overwrite", "insert", "none", "none"]
CELL_VALUES = [np.nan, np.inf, -np.inf, -1, 0, 1e30, -1e30]


def _mutated_fits(kind, data):
    op = data.draw(st.sampled_from(STRUCTURAL), label="structural")
    raw = _variant(kind, op, data.draw(st.integers(0, 1), label="hdu"),
                   data.draw(st.integers(0, 8), label="column"),
                   data.draw(st.sampled_from(CELL_VALUES), label="cell value"),
                   data.draw(st.sampled_from([0, 1, -1]), label="position"))
    for _ in range(data.draw(st.integers(0, 2), label="header edits")):
        raw = _header_edit(raw, data.draw(st.sampled_from(HEADER), label="header"),
                           data.draw(KEYWORDS, label="keyword"),
                           data.draw(ODD_VALUES, label="value"))
    return _bytewise(raw, data.draw(st.sampled_from(BYTEWISE), label="bytewise"), data)


def _fuzz(kind, reader, data, suffix):
    raw = _mutated_fits(kind, data)
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, f"fuzz{suffix}")
        with open(path, "wb") as fh:
            fh.write(raw)
        _only_edgefit_outcomes(lambda: reader(path))


@FUZZ
@given(st.data())
def test_fuzz_pha(data):
    kind = data.draw(st.sampled_from(["pha1", "pha2"]), label="PHA type")
    _fuzz(kind, lambda p: read_pha_rows(p, attach=False), data, ".pha")


@FUZZ
@given(st.data())
def test_fuzz_arf(data):
    _fuzz("arf", read_arf, data, ".arf")


@FUZZ
@given(st.data())
def test_fuzz_rmf(data):
    _fuzz("rmf", read_rmf, data, ".rmf")


# -- plain-text tables --------------------------------------------------------
SIZE_TABLE = ("# radius (um)  n(a)\n" +
              "".join(f"{a:.5g}, {a ** -3.5:.5g}\n" for a in np.geomspace(0.005, 0.25, 12)))
LAB_TABLE = ("# energy (eV)  mu (cm^-1)\n" +
             "".join(f"{e:.2f} {1e4 * (1 + (e > 1840)):.4g}\n"
                     for e in np.linspace(1820, 1870, 20)))
TOKENS = st.sampled_from(["nan", "inf", "-inf", "-1", "0", "1e999", "abc", ",", "#", "",
                          "\t", "1,2,3", "\x00", "é", "0x1F", "1_000", "--", "1e-400"])


def _mutated_text(text, data):
    lines = text.splitlines(keepends=True)
    for _ in range(data.draw(st.integers(1, 4), label="edits")):
        op = data.draw(st.sampled_from(["drop", "dup", "token", "truncate", "bytes"]))
        if not lines:
            break
        i = data.draw(st.integers(0, len(lines) - 1), label="line")
        if op == "drop":
            del lines[i]
        elif op == "dup":
            lines.insert(i, lines[i])
        elif op == "token":
            words = lines[i].split()
            if words:
                j = data.draw(st.integers(0, len(words) - 1), label="word")
                words[j] = data.draw(TOKENS, label="token")
                lines[i] = " ".join(words) + "\n"
        elif op == "truncate":
            lines = lines[:i] + [lines[i][:data.draw(st.integers(0, len(lines[i])))]]
    raw = "".join(lines).encode("utf-8")
    if data.draw(st.booleans(), label="raw bytes"):
        raw = _bytewise(raw, data.draw(st.sampled_from(BYTEWISE[:3]), label="bytewise"),
                        data, keep=0) if raw else raw
    return raw


def _fuzz_text(text, reader, data):
    raw = _mutated_text(text, data)
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "table.txt")
        with open(path, "wb") as fh:
            fh.write(raw)
        _only_edgefit_outcomes(lambda: reader(path))


@FUZZ
@given(st.data())
def test_fuzz_size_table(data):
    _fuzz_text(SIZE_TABLE, read_size_table, data)


@FUZZ
@given(st.data())
def test_fuzz_lab_absorption_table(data):
    _fuzz_text(LAB_TABLE, read_lab_absorption, data)


# -- TOML configuration -------------------------------------------------------
# the example sightline, its spectra named by absolute path so that the
# mutated copy (in a temporary folder) still finds them
CONFIG = (REPO / "examples" / "amber_loom" / "amber_loom.toml").read_text().replace(
    'pha = "', f'pha = "{(REPO / "examples" / "amber_loom").as_posix()}/')
TOML_TOKENS = st.sampled_from(['nan', 'inf', '-inf', '-1', '0', '1e999', '"text"', '[]', '{}',
                               'true', '[1, "a"]', '{ value = "x" }', '"../nowhere.pha"',
                               '1979-05-27', '"olivine"', '"Si"', '"nosuchtype"', '[[1]]',
                               '""', '1e-400', '-0'])


def _mutated_toml(data):
    lines = CONFIG.splitlines(keepends=True)
    for _ in range(data.draw(st.integers(1, 3), label="edits")):
        op = data.draw(st.sampled_from(["drop", "dup", "value", "key", "truncate"]))
        i = data.draw(st.integers(0, len(lines) - 1), label="line")
        if op == "drop":
            del lines[i]
        elif op == "dup":
            lines.insert(i, lines[i])
        elif op == "value" and "=" in lines[i]:
            key = lines[i].split("=", 1)[0]
            lines[i] = f"{key}= {data.draw(TOML_TOKENS, label='value')}\n"
        elif op == "key" and "=" in lines[i]:
            val = lines[i].split("=", 1)[1]
            lines[i] = data.draw(st.sampled_from(["bogus", "params.nope", "type", "options"]),
                                 label="key") + " =" + val
        elif op == "truncate":
            lines = lines[:i + 1]
            lines[i] = lines[i][:data.draw(st.integers(0, len(lines[i])))]
        if not lines:
            break
    raw = "".join(lines).encode("utf-8")
    if data.draw(st.integers(0, 9), label="raw bytes") == 0 and raw:
        raw = _bytewise(raw, "overwrite", data, keep=0)
    return raw


@FUZZ
@given(st.data())
def test_fuzz_toml_configuration(data):
    raw = _mutated_toml(data)
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "sightline.toml")
        with open(path, "wb") as fh:
            fh.write(raw)
        _only_edgefit_outcomes(lambda: load_config(path))
