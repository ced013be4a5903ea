"""Poisson simulation of spectra from a model photon flux and a response.

The expected source counts per channel are

    mu_s = t_s (R x A) @ f,

with f the model photon flux per energy bin (photons cm^-2 s^-1 per bin),
R x A the response matrix (cm^2), t_s the exposure.  A background rate
r_b (counts s^-1 per channel in the background region, whose area scaling
is BACKSCAL_b) adds

    mu_b,src = r_b t_s BACKSCAL_s / BACKSCAL_b

to the source region, and the background spectrum itself is drawn with
mean r_b t_b.  Counts are drawn from a seeded :class:`numpy.random.Generator`.
"""
from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from ..errors import ArgumentError, BadExposureError, ModelError
from .response import Response
from .spectrum import Spectrum

__all__ = ["simulate_spectrum", "expected_counts"]


def _rng(rng):
    if isinstance(rng, np.random.Generator):
        return rng
    if rng is None:
        raise ArgumentError("pass a seed or a numpy Generator: simulations must be reproducible")
    return np.random.default_rng(rng)


def expected_counts(flux: ArrayLike, response: Response, exposure: float,
                    background_rate: ArrayLike | None = None, backscal: float = 1.0,
                    background_backscal: float = 1.0) -> np.ndarray:
    """Expected counts per channel in the source region (see module docstring)."""
    flux = np.asarray(flux, dtype=float)
    if flux.shape != (response.n_energies,):
        raise ModelError(f"flux has {flux.size} values but the response has "
                         f"{response.n_energies} energy bins")
    if not np.all(np.isfinite(flux)) or np.any(flux < 0):
        raise ModelError("flux must be finite and non-negative")
    mu = response.fold(flux, float(exposure))
    if background_rate is not None:
        mu = mu + (np.asarray(background_rate, float) * exposure *
                   np.asarray(backscal, float) / np.asarray(background_backscal, float))
    return mu


def simulate_spectrum(flux: ArrayLike, response: Response, exposure: float,
                      rng: np.random.Generator, *, background_rate: ArrayLike | None = None,
                      backscal: float = 1.0, background_backscal: float = 1.0,
                      background_exposure: float | None = None,
                      meta: dict | None = None) -> Spectrum:
    """Draw a Poisson spectrum (and optionally its background spectrum).

    Parameters
    ----------
    flux : ndarray, shape (n_energies,)
        Model photon flux per energy bin, photons cm^-2 s^-1 per bin
        (what an additive model returns on ``response.grid``).
    response : Response
    exposure : float
        Source exposure, s.
    rng : int or numpy.random.Generator
        Seed or generator (required: simulations must be reproducible).
    background_rate : ndarray, shape (n_channels,), optional
        Background count rate in the *background* region, counts s^-1 per
        channel.  When given, the returned spectrum has a ``background``
        drawn with exposure ``background_exposure`` (default ``exposure``).
    backscal, background_backscal : float
        Area scalings of source and background regions (BACKSCAL).
    meta : dict, optional
        Extra metadata (e.g. ``order``, ``arm``, ``object``); the result is
        marked ``meta['simulated'] = True``.

    Returns
    -------
    Spectrum
        With ``response`` attached and Poisson counts.
    """
    if not (np.isfinite(exposure) and exposure > 0):
        raise BadExposureError(None, f"exposure {exposure} s; must be positive")
    gen = _rng(rng)
    mu = expected_counts(flux, response, exposure, background_rate, backscal,
                         background_backscal)
    counts = gen.poisson(mu).astype(float)
    info = {"path": None, "simulated": True, "respfile": response.rmf_path,
            "ancrfile": response.arf_path}
    info.update(meta or {})
    spec = Spectrum(counts=counts, exposure=float(exposure), channels=response.channels.copy(),
                    backscal=backscal, response=response, poisson=True, meta=info)
    if background_rate is not None:
        t_b = float(exposure if background_exposure is None else background_exposure)
        if not (np.isfinite(t_b) and t_b > 0):
            raise BadExposureError(None, f"background exposure {t_b} s; must be positive")
        b_counts = gen.poisson(np.asarray(background_rate, float) * t_b).astype(float)
        spec.background = Spectrum(counts=b_counts, exposure=t_b,
                                   channels=response.channels.copy(),
                                   backscal=background_backscal, poisson=True,
                                   meta={"path": None, "simulated": True,
                                         **{k: v for k, v in info.items()
                                            if k in ("order", "arm", "object")}})
    return spec
