"""The free-parameter vector path of the likelihood (JointLikelihood.compile),
the fused folding + deviance kernels and the dust component's fit-time
caches.

References: the values-dict path of JointLikelihood (the interface users
and earlier results rely on; the vector path must reproduce it to 1e-10
relative, the project's agreement target for the speed work); SciPy's
CSR matrix product and scipy.special.xlogy for the Poisson deviance
2 sum[m - n + n ln(n/m)] (Cash 1979, ApJ 228, 939; Kaastra 2017, A&A 605,
A51, eq. 4); lmfit's own expression evaluation for ties.
"""
import math
import pickle

import lmfit
import numpy as np
import pytest
import scipy.sparse as sp
from scipy.special import xlogy

from edgefit import _foldstat
from edgefit.dust import SizeGrid, compute_table, edge_energy_grid
from edgefit.inference import Dataset, JointLikelihood, fit_sightline
from edgefit.inference._testing import (simulate_counts, three_arm_datasets, toy_model,
                                        toy_response)
from edgefit.inference.likelihood import BAD_RESIDUAL, _linear_tie
from edgefit.models import DustEdge, GasEdge, PhotonPowerLaw, SmoothISM

REL = 1e-10


@pytest.fixture(autouse=True)
def _tmp_cache(tmp_path, monkeypatch):
    monkeypatch.setenv("EDGEFIT_CACHE_DIR", str(tmp_path))


@pytest.fixture(scope="module")
def table():
    energy = edge_energy_grid("olivine", 1.66, 2.14, rel_step=3e-3)
    return compute_table("olivine", energy, SizeGrid.log(0.002, 3.0, 48), progress=False)


TRUE = {"ism_nh": 1.5, "gas_si_col": 6.0, "gas_si_shift": 1.0, "dust_col": 25.0,
        "dust_amax": 0.3, "dust_index": 3.4, "dust_shift": 2.0, "pl_index": 1.7,
        "pl_norm": 1.2}


def _model(table):
    return (SmoothISM("ism", exclude=("Si",)) * GasEdge("gas_si", element="Si")
            * DustEdge("dust", table=table) * PhotonPowerLaw("pl"))


@pytest.fixture(scope="module")
def sightline(table):
    """Two arms sharing one energy grid (one model evaluation), a third on
    its own grid with a background: exercises the shared plan, the fused
    kernels and the generic (profiled-background) path."""
    model = _model(table)
    ds = three_arm_datasets(model, TRUE)
    return model, ds


def _params(like, tie=None):
    params = like.make_params()
    for name in ("gas_si_shift", "dust_index", "dust_shift"):
        params[name].vary = True
    for k, v in TRUE.items():
        params[k].value = v
    if tie:
        params["xnorm_3"].expr = tie
    return params


@pytest.mark.parametrize("statistic", ["poisson", "chi2"])
@pytest.mark.parametrize("tie", [None, "1.05 * xnorm_2", "xnorm_2 ** 1.5 / 2 + 0.5"])
def test_vector_path_equals_parameters_path(sightline, statistic, tie):
    """statistic, residuals, log-likelihood and expected counts from the
    free vector equal the values-dict path (what lmfit Parameters give,
    ties by lmfit's interpreter) to 1e-10 relative at 12 random points."""
    model, ds = sightline
    like = JointLikelihood(model, ds, statistic=statistic)
    params = _params(like, tie)
    ev = like.compile(params)
    assert ev.free == [n for n, p in params.items() if p.vary and not p.expr]
    assert bool(ev._expr_ties) == (tie is not None and "**" in tie)
    rng = np.random.default_rng(7)
    x0 = ev.vector(params)
    for _ in range(12):
        theta = np.clip(x0 * (1 + 0.05 * rng.standard_normal(x0.size)), ev.lower, ev.upper)
        p = params.copy()
        for n, x in zip(ev.free, theta):
            p[n].value = float(x)
        p.update_constraints()
        vals = p.valuesdict()
        ref_stat = like.statistic(vals)
        assert ev.statistic(theta) == pytest.approx(ref_stat, rel=REL, abs=0)
        assert ev(theta) == pytest.approx(ref_stat, rel=REL, abs=0)
        assert ev.log_likelihood(theta) == pytest.approx(like.log_likelihood(vals), rel=REL,
                                                         abs=0)
        r_ref = like.residuals(vals)
        r = ev.residuals(theta)
        assert r.shape == r_ref.shape
        np.testing.assert_allclose(r, r_ref, rtol=0, atol=REL * np.max(np.abs(r_ref)))
        for a, b in zip(ev.source_counts(theta), like.source_counts(vals)):
            np.testing.assert_allclose(a, b, rtol=REL, atol=0)
        full = ev.values(theta)
        for n in vals:
            assert full[n] == pytest.approx(vals[n], rel=1e-15, abs=0)


def test_compile_from_free_names_and_pickle(sightline):
    """Free names + values give the same evaluator as Parameters; a pickled
    evaluator (as a process pool receives it) gives the same numbers."""
    model, ds = sightline
    like = JointLikelihood(model, ds)
    params = _params(like)
    ev = like.compile(params)
    free = ["dust_amax", "dust_col", "pl_norm"]
    ev2 = like.compile(free=free, values=params.valuesdict())
    theta = np.array([0.25, 30.0, 1.1])
    vals = dict(params.valuesdict(), dust_amax=0.25, dust_col=30.0, pl_norm=1.1)
    assert ev2.statistic(theta) == pytest.approx(like.statistic(vals), rel=REL, abs=0)
    clone = pickle.loads(pickle.dumps(ev))
    assert clone._plan is None
    x0 = ev.vector(params)
    assert clone.statistic(x0) == pytest.approx(ev.statistic(x0), rel=REL, abs=0)


def test_repeated_and_partial_changes_reuse_nothing_stale(sightline):
    """Leaf and dust caches: cycling through points that change one
    parameter at a time (as a finite-difference Jacobian does) gives the
    values-dict statistic at every step, in any order."""
    model, ds = sightline
    like = JointLikelihood(model, ds)
    params = _params(like)
    ev = like.compile(params)
    x0 = ev.vector(params)
    pts = [x0]
    for k in range(x0.size):
        t = x0.copy()
        t[k] *= 1.01
        pts.append(t)
    for t in pts + pts[::-1] + pts:
        vals = ev.values(t)
        assert ev.statistic(t) == pytest.approx(like.statistic(vals), rel=REL, abs=0)


def test_nan_policy_on_vector_path(sightline):
    model, ds = sightline
    like = JointLikelihood(model, ds)
    ev = like.compile(free=["pl_norm"], values=TRUE)
    before = like.n_bad_evaluations
    assert ev.statistic([-1.0]) == math.inf          # negative expected counts
    assert ev.log_likelihood([float("nan")]) == -math.inf
    assert np.all(ev.residuals([-1.0]) == BAD_RESIDUAL)
    assert like.n_bad_evaluations == before + 3
    assert math.isfinite(ev.statistic([1.0]))


@pytest.mark.parametrize("expr, want", [
    ("x", ("x", 1.0, 1.0, 0.0)), ("2.5*x", ("x", 2.5, 1.0, 0.0)),
    ("x * 3", ("x", 3.0, 1.0, 0.0)), ("x / 4", ("x", 1.0, 4.0, 0.0)),
    ("-x", ("x", -1.0, 1.0, 0.0)), ("0.5 * x + 1", ("x", 0.5, 1.0, 1.0)),
    ("x - 2", ("x", 1.0, 1.0, -2.0)), ("1e-3 + x", ("x", 1.0, 1.0, 1e-3)),
    ("x * y", None), ("sqrt(x)", None), ("x ** 2", None), ("2 - x", None),
    ("x / 0", None), ("'a'", None)])
def test_linear_tie_forms(expr, want):
    """Only expressions whose arithmetic a*x/d + b reproduces lmfit's
    exactly are mapped by index; the rest go through lmfit."""
    assert _linear_tie(expr) == want


def test_linear_ties_match_lmfit_bit_for_bit():
    """The index-map tie arithmetic equals lmfit's interpreter exactly for
    the forms it accepts (the configuration files write 'factor * name')."""
    rng = np.random.default_rng(0)
    for expr in ("0.37 * a", "a * 1.3", "a / 7", "-a", "2.5 * a - 0.25", "0.1 + a"):
        src, a, d, b = _linear_tie(expr)
        for x in rng.normal(size=20) * 10:
            p = lmfit.Parameters()
            p.add("a", value=float(x))
            p.add("t", expr=expr)
            p.update_constraints()
            assert a * x / d + b == p["t"].value


def test_fused_kernels_against_scipy():
    """Folding + deviance in one pass against SciPy's CSR product and the
    deviance 2 sum[m - n + xlogy(n, n) - xlogy(n, m)] (Cash 1979; Kaastra
    2017 eq. 4) written with scipy.special.xlogy; zero counts included;
    1e-12 relative."""
    rng = np.random.default_rng(4)
    mat = sp.random_array((300, 420), density=0.05, random_state=rng, format="csr") * 0.05
    mat = sp.csr_array(mat)
    flux = np.exp(rng.normal(size=500))
    off = 37
    counts = rng.poisson(mat @ flux[off:off + 420] * 1.3).astype(float)
    assert (counts == 0).any()
    fm = _foldstat.Folding(mat)
    mu = 1.3 * (mat @ flux[off:off + 420])
    mu_safe = np.maximum(mu, 1e-300)
    ref = float(np.sum(2 * (mu_safe - counts + xlogy(counts, counts) - xlogy(counts, mu_safe))))
    np.testing.assert_allclose(_foldstat.fold(fm, flux, off, 1.3), mu, rtol=1e-12, atol=0)
    c, ok = _foldstat.fold_deviance(fm, flux, off, 1.3, counts)
    assert ok and c == pytest.approx(ref, rel=1e-12, abs=0)
    out = np.full(310, 7.0)
    assert _foldstat.fold_residuals(fm, flux, off, 1.3, counts, out, 5)
    r = out[5:305]
    assert np.sum(r * r) == pytest.approx(ref, rel=1e-12, abs=0)
    assert np.all(np.sign(r) == np.sign(counts - mu))
    assert out[0] == 7.0 and out[305] == 7.0
    bad = flux.copy()
    bad[off + mat.indices[0]] = np.nan
    assert _foldstat.fold_deviance(fm, bad, off, 1.3, counts) == (math.inf, False)
    assert not _foldstat.fold_residuals(fm, bad, off, 1.3, counts, out, 5)


def test_dust_fast_path_equals_direct_optical_depth(table):
    """The cached dust transmission (size average as one product, per-column
    shape, restricted table rows) against exp(-optical_depth), which
    evaluates the size averages directly (separate absorption and
    scattering sums, then the interpolation): 1e-10 relative on τ, for
    shifts inside and outside the declared range and with a halo-free
    f_in > 0."""
    from edgefit.models.base import EnergyGrid

    grid = EnergyGrid.linear(1.72, 2.08, 700)
    dust = DustEdge(table=table, col=40.0)
    for amax, index, shift, fin, n in [(0.3, 3.5, 0.0, 0.0, 40.0), (0.3, 3.5, 0.0, 0.0, 80.0),
                                        (0.8, 2.8, 15.0, 0.3, 40.0),
                                        (0.8, 2.8, -19.5, 0.3, 12.0),
                                        (0.3, 3.5, 0.0, 0.0, 40.0)]:
        vals = {"amax": amax, "index": index, "shift": shift, "fin": fin, "col": n}
        t = dust.evaluate(grid, {f"dust_{k}": v for k, v in vals.items()})
        tau_ref = dust.optical_depth(grid.mid, **vals)
        np.testing.assert_allclose(-np.log(t), tau_ref, rtol=REL,
                                   atol=REL * np.max(np.abs(tau_ref)))
    # a shift beyond the declared bounds (a user widening them) uses the full table
    vals = {"amax": 0.3, "shift": 30.0}
    t = dust.evaluate(grid, {f"dust_{k}": v for k, v in vals.items()})
    tau_ref = dust.optical_depth(grid.mid, **vals)
    np.testing.assert_allclose(-np.log(t), tau_ref, rtol=REL,
                               atol=REL * np.max(np.abs(tau_ref)))


def test_fit_uses_vector_objective_and_matches():
    """A fit through the vector objective reaches the same statistic as
    the values-dict statistic at its end point (1e-10)."""
    res = fit_sightline(toy_model(), [Dataset(simulate_counts(
        toy_model(), toy_response(1.6, 2.2, n_channels=150), 50.0, seed=2))], warn=False)
    like = res.likelihood
    assert res.statistic == pytest.approx(like.statistic(res.params.valuesdict()), rel=REL,
                                          abs=0)
    ev = like.compile(res.params)
    assert ev.statistic(ev.vector(res.params)) == pytest.approx(res.statistic, rel=REL, abs=0)


@pytest.mark.parametrize("band", [True, False])
def test_folding_group_against_scipy(band):
    """Several datasets stacked into one group (band rows folded as
    contiguous dot products, or general CSR rows): the summed deviance and
    the residuals placed at each dataset's offset equal the per-dataset
    SciPy products and the xlogy deviance (Cash 1979) to 1e-12 relative."""
    rng = np.random.default_rng(8)
    mats, offs, counts, mus = [], [], [], []
    flux = np.exp(rng.normal(size=260))
    for k, (rows, cols, off) in enumerate([(50, 200, 10), (70, 180, 60), (40, 240, 0)]):
        if band:
            dense = np.zeros((rows, cols))
            for i in range(rows):
                a = int(rng.integers(0, cols - 12))
                dense[i, a:a + int(rng.integers(1, 12))] = rng.random()
            mat = sp.csr_array(dense)
        else:
            mat = sp.csr_array(sp.random_array((rows, cols), density=0.08, random_state=rng,
                                               format="csr"))
        xn = 0.8 + 0.2 * k
        mu = xn * (mat @ flux[off:off + cols])
        mats.append(mat)
        offs.append(off)
        mus.append(mu)
        counts.append(rng.poisson(mu).astype(float))
    group = _foldstat.FoldingGroup(mats, offs, counts)
    assert (group.start is not None) == band
    xn = np.array([0.8, 1.0, 1.2])
    ref = 0.0
    for mu, n in zip(mus, counts):
        m = np.maximum(mu, 1e-300)
        ref += float(np.sum(2 * (m - n + xlogy(n, n) - xlogy(n, m))))
    c, ok = group.deviance(flux, xn)
    assert ok and c == pytest.approx(ref, rel=1e-12, abs=0)
    out = np.full(200, np.nan)
    starts = np.array([110, 0, 70])
    assert group.residuals(flux, xn, out, starts)
    for mu, n, s0 in zip(mus, counts, starts):
        r = out[s0:s0 + mu.size]
        assert np.all(np.sign(r) == np.sign(n - mu))
    assert np.nansum(out ** 2) == pytest.approx(ref, rel=1e-12, abs=0)
    assert np.isnan(out[160:]).all()


def test_size_weights_compiled_path_equals_numpy_path(monkeypatch):
    """The numba nodes/moments of SizeGrid.weights against its NumPy path
    (same algorithm, so equal to rounding: 1e-13 of the largest weight),
    for every family and supports that start/end on, inside and at the
    ends of the grid; and both integrate a^3 exactly as the distribution's
    own Gauss-Legendre moment does (1e-10)."""
    from edgefit.dust import sizes

    grid = SizeGrid.log(0.001, 5.0, 160)
    dists = [sizes.PowerLaw(3.5, 0.005, 0.3), sizes.PowerLaw(2.1, 0.001, 5.0),
             sizes.PowerLaw(4.0, grid.a[10], grid.a[40]), sizes.LogNormal(0.1, 0.4, 0.001, 5.0),
             sizes.CutoffPowerLaw(), sizes.PowerLaw(3.5, 0.00123, 0.0045)]
    if sizes._numba_kernels() is None:
        pytest.skip("numba not available")
    fast = [grid.weights(d) for d in dists]
    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "1")
    assert sizes._numba_kernels() is None
    slow = [grid.weights(d) for d in dists]
    for d, a, b in zip(dists, fast, slow):
        np.testing.assert_allclose(a, b, rtol=0, atol=1e-13 * np.max(np.abs(b)))
        assert a @ grid.a ** 3 == pytest.approx(d.moment(3), rel=1e-10, abs=0)


def test_compiled_continuum_and_gas_kernels_equal_numpy_paths(monkeypatch):
    """The compiled photon power law and shifted gas edge against their
    NumPy lines (EDGEFIT_NO_NUMBA), 1e-13 relative; the power law also
    against its closed-form bin integral norm (hi^(1-G) - lo^(1-G)) / (1-G)
    (pivot 1 keV) to 1e-12, and the gas edge at a shift against the
    unshifted cross section evaluated at E - shift
    (edgefit.physics.atomic.photoabsorption, 2 r_e lambda f2)."""
    from edgefit.models import continuum
    from edgefit.models import absorption
    from edgefit.models.base import EnergyGrid
    from edgefit.physics import atomic

    if continuum._numba_kernels() is None:
        pytest.skip("numba not available")
    grid = EnergyGrid.linear(1.6, 2.2, 777)
    pl = PhotonPowerLaw("pl")
    gas = GasEdge("g", element="Si")
    cases = [(1.7, 1.3), (1.0, 2.0), (-0.5, 0.7)]
    shifts = [0.0, 3.5, -12.0]
    fast = ([pl.evaluate(grid, {"pl_index": g, "pl_norm": n}) for g, n in cases]
            + [gas.evaluate(grid, {"g_col": 8.0, "g_shift": s}) for s in shifts])
    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "1")
    assert continuum._numba_kernels() is None and absorption._numba_kernels() is None
    slow = ([pl.evaluate(grid, {"pl_index": g, "pl_norm": n}) for g, n in cases]
            + [gas.evaluate(grid, {"g_col": 8.0, "g_shift": s}) for s in shifts])
    for a, b in zip(fast, slow):
        np.testing.assert_allclose(a, b, rtol=1e-13, atol=0)
    for (g, n), a in zip(cases, fast):
        ref = n * (grid.hi ** (1 - g) - grid.lo ** (1 - g)) / (1 - g) if g != 1 else \
            n * np.log(grid.hi / grid.lo)
        np.testing.assert_allclose(a, ref, rtol=1e-12, atol=0)
    for s, a in zip(shifts, fast[3:]):
        ref = np.exp(-8.0e16 * atomic.photoabsorption("Si", grid.mid - s * 1e-3))
        np.testing.assert_allclose(a, ref, rtol=1e-12, atol=0)


def test_compiled_product_of_absorbers_sums_log_transmissions(table):
    """A product of absorbers that give ln T is one exponential of the
    summed logarithms on the vector path: equal to the product of the
    separate transmissions (ModelNode.evaluate) to 1e-13; a subclass that
    overrides _evaluate only is evaluated through its own _evaluate."""
    from edgefit.models.base import CompiledModel, EnergyGrid, _Exp

    class HalfGas(GasEdge):
        registry_name = ""        # not registered

        def _evaluate(self, grid, pre, **v):
            return 0.5 * super()._evaluate(grid, pre, **v)

    grid = EnergyGrid.linear(1.72, 2.08, 500)
    model = _model(table)
    names = list(model.parameters())
    cm = CompiledModel(model, grid, names)
    assert isinstance(cm.root.left, _Exp)
    vals = dict(model.default_values(), **TRUE)
    got = cm([vals[n] for n in names])
    np.testing.assert_allclose(got, model.evaluate(grid, vals), rtol=1e-13, atol=0)
    odd = SmoothISM("ism", exclude=("Si",)) * HalfGas("gas_si", element="Si") * \
        PhotonPowerLaw("pl")
    names = list(odd.parameters())
    vals = {n: v for n, v in dict(odd.default_values(), **TRUE).items() if n in names}
    cm = CompiledModel(odd, grid, names)
    assert not isinstance(cm.root.left, _Exp)
    got = cm([vals[n] for n in names])
    np.testing.assert_allclose(got, odd.evaluate(grid, vals), rtol=1e-13, atol=0)


def test_dust_compiled_interpolation_equals_numpy_interp(table, monkeypatch):
    """The dust edge's compiled pass (interpolation onto the shifted bin
    centres and the column scaling) against its NumPy lines, np.interp
    (NumPy's linear interpolation, end values outside the table): 1e-14
    relative, for shifts inside the declared range and beyond it (the
    whole table; a 60 eV shift reaches past its low end)."""
    from edgefit.models import dust as dust_module
    from edgefit.models.base import EnergyGrid

    if dust_module._numba_kernels() is None:
        pytest.skip("numba not available")
    grid = EnergyGrid.linear(1.67, 2.13, 640)     # inside the table's 1.66-2.14 keV
    cases = [(0.3, 3.5, 0.0, 40.0), (0.8, 2.8, 15.0, 12.0), (0.5, 3.1, -19.5, 30.0),
             (0.3, 3.5, 60.0, 25.0)]

    def run():
        dust = DustEdge(table=table)
        return [dust.evaluate(grid, {"dust_amax": a, "dust_index": q, "dust_shift": s,
                                     "dust_col": n}) for a, q, s, n in cases]

    fast = run()
    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "1")
    assert dust_module._numba_kernels() is None
    slow = run()
    for a, b in zip(fast, slow):
        np.testing.assert_allclose(a, b, rtol=1e-14, atol=0)


def test_size_weights_kernel_only_for_the_declaring_class(monkeypatch):
    """A subclass of a built-in family that changes the shape at the nodes
    takes the general path (its own _shape_nodes), not the family's
    compiled shape: its weights equal its NumPy path (1e-13 of the largest
    weight) and differ from the parent's; both integrate a^3 as the
    distribution's own Gauss-Legendre moment does (1e-10)."""
    from edgefit.dust import sizes

    class Flatter(sizes.PowerLaw):
        register = False

        def shape(self, a_um):
            return np.asarray(a_um, dtype=float) ** (1.0 - self.values["index"])

        def _shape_nodes(self, a, ln_a):
            return self.shape(a)

    if sizes._numba_kernels() is None:
        pytest.skip("numba not available")
    grid = SizeGrid.log(0.001, 5.0, 160)
    child, parent = Flatter(3.5, 0.005, 0.3), sizes.PowerLaw(3.5, 0.005, 0.3)
    fast = grid.weights(child)
    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "1")
    slow = grid.weights(child)
    np.testing.assert_allclose(fast, slow, rtol=0, atol=1e-13 * np.max(np.abs(slow)))
    assert not np.allclose(fast, grid.weights(parent), rtol=1e-3)
    assert fast @ grid.a ** 3 == pytest.approx(child.moment(3), rel=1e-10, abs=0)


def test_numba_switch_follows_the_environment(monkeypatch):
    """EDGEFIT_NO_NUMBA switches the kernels off when set to a non-empty
    value and on again when empty or removed, at any time (os.environ as
    the standard library defines it)."""
    from edgefit import _jit

    monkeypatch.delenv("EDGEFIT_NO_NUMBA", raising=False)
    assert not _jit.disabled()
    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "1")
    assert _jit.disabled() and _foldstat._numba_kernels() is None
    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "")
    assert not _jit.disabled()
    monkeypatch.setenv("EDGEFIT_NO_NUMBA", "yes")
    monkeypatch.delenv("EDGEFIT_NO_NUMBA")
    assert not _jit.disabled()


def test_compiled_leaves_call_positionally_only_matching_signatures():
    """A compiled leaf passes values positionally only to a function whose
    parameters after (grid, pre) are the component's parameter names in
    order (the smooth ISM's log transmission), and by keyword otherwise
    (a **values signature; names in another order)."""
    from edgefit.models.base import _takes_positionally

    ism = SmoothISM("ism")
    assert _takes_positionally(ism._log_transmission, tuple(ism.values))

    def by_keyword(grid, pre, **values):
        return values

    def swapped(grid, pre, mol_frac, nh):
        return nh

    assert not _takes_positionally(by_keyword, ("nh", "mol_frac"))
    assert not _takes_positionally(swapped, ("nh", "mol_frac"))
