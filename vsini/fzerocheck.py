"""Marginal first zeros: a zero compared with the transform expected from the main lobe.

Rule 5 of :mod:`vsini.ftransform` (the module docstring there gives the whole set of rules and their
sources): a zero accepted because noise deepened a lobe that is really below the threshold is selected
for a steep slope, so its first-order error is too small; :func:`zero_check` tells such a zero from a
sound one. Used by :func:`vsini.fourier.fourier_vsini`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .ftransform import _PAD, _TWO_PI, DEFAULT_THRESHOLD, _sums

__all__ = ["ZeroCheck", "zero_check"]


@dataclass(frozen=True)
class ZeroCheck:
    """A first zero compared with the transform expected from the main lobe (:func:`zero_check`).

    Attributes
    ----------
    slope_observed, slope_model : float
        :math:`\\partial_\\sigma\\mathrm{Re}\\,T` at the zero: of the data, and of the model
        :math:`M(\\sigma)` fitted to the main lobe (km/s).
    noise : float
        :math:`\\eta(\\sigma_1)`, rms of the noise of :math:`\\mathrm{Re}\\,T` at the zero.
    lobe_snr_model : float
        Largest :math:`|M|/\\eta` in the lobe after the zero (below ``sigma_top``): how far the lobe that
        confirms the zero should stand above the noise.
    envelope_b_kms : float
        1/e half-width of the Gaussian envelope fitted to the main lobe (intrinsic profile and whatever
        else the known kernel lacks).
    marginal : bool
        ``lobe_snr_model < threshold``: the data show a lobe the main lobe cannot account for at this noise.
    """

    slope_observed: float
    slope_model: float
    noise: float
    lobe_snr_model: float
    envelope_b_kms: float
    marginal: bool

    @property
    def error_observed(self):
        """First-order error of the zero with the data's slope, :math:`\\eta/|T'_\\mathrm{data}|` (s/km)."""
        return self.noise / abs(self.slope_observed) if self.slope_observed else math.inf

    @property
    def error_model(self):
        """First-order error with the model's slope, :math:`\\eta/|M'|` (s/km)."""
        return self.noise / abs(self.slope_model) if self.slope_model else math.inf


def zero_check(prep, sigma1, known_transform, *, sigma_top, threshold=DEFAULT_THRESHOLD, pad=_PAD):
    """Is an accepted first zero confirmed by the transform the main lobe predicts?

    Parameters
    ----------
    prep : prepared window or mean profile (internal)
    sigma1 : float
        The accepted first zero, s/km.
    known_transform : callable
        :math:`K(\\sigma)`: the transform of everything known for the measured v sin i (rotation with its
        limb darkening and any given macroturbulence, instrument, pixel box); it has its first zero at
        ``sigma1``.
    sigma_top : float
        End of the usable range, s/km (the lobe is looked at below it, as in the zero search).
    threshold : float
        Noise multiple the predicted lobe must reach.

    Returns
    -------
    ZeroCheck

    Notes
    -----
    What the known kernel lacks (the intrinsic profile, isotropic macroturbulence) multiplies the transform
    by a smooth factor without zeros, modelled as :math:`e^{-(\\pi b\\sigma)^2}` (the transform of a
    Gaussian; T and K are both 1 at :math:`\\sigma = 0`). b comes from a weighted least-squares fit of
    :math:`\\ln(\\mathrm{Re}\\,T/K) = -(\\pi b\\sigma)^2`
    over the main lobe away from the zero (:math:`K \\ge 0.2`, :math:`\\mathrm{Re}\\,T \\ge`
    ``threshold`` :math:`\\eta`), weights :math:`(\\mathrm{Re}\\,T/\\eta)^2` (the inverse variance of the
    logarithm to first order); :math:`b^2 < 0` is clipped to 0. The model :math:`M = K e^{-(\\pi b\\sigma)^2}`
    is then compared with the noise in the lobe after :math:`\\sigma_1`, up to M's next zero.

    Why: the zero search accepts a zero when the data's lobe after it reaches ``threshold`` :math:`\\eta`.
    When the true lobe is lower, only realisations whose noise deepens it pass, and the same noise steepens
    the slope at the zero (the noise is correlated over :math:`\\sim 1/L` in :math:`\\sigma`), so
    :math:`\\eta/|T'|` understates the scatter of the zero (a selection effect on top of the noisy
    denominator of a root, Fieller 1954 [3]_). The main lobe carries far more signal and is not selected
    on, so M predicts the true lobe; a zero whose predicted lobe stays below the threshold is marginal. The
    rule uses no constant beyond the detection ``threshold`` itself.
    """
    x, a, b = prep.x, prep.a, prep.b
    dsig = 1.0 / (pad * prep.span)
    hi = min(float(sigma_top), 3.0 * sigma1) if math.isfinite(sigma_top) else 3.0 * sigma1
    grid = np.arange(dsig, max(hi, sigma1 + 2 * dsig) + 0.5 * dsig, dsig)
    g, _, var = _sums(grid, x, a, b**2)
    g, eta = g[0], np.sqrt(var)
    k = np.asarray(known_transform(grid), dtype=float).real
    fit = (grid < sigma1) & (k >= 0.2) & (g >= threshold * eta) & (eta > 0)
    xx = (np.pi * grid[fit]) ** 2
    if fit.any():  # Eq.: ln(Re T / K) = -(pi b sigma)^2, weighted least squares through T(0) = K(0) = 1
        y = np.log(g[fit] / k[fit])
        w = (g[fit] / eta[fit]) ** 2
        beta = max(-float(np.sum(w * xx * y) / np.sum(w * xx * xx)), 0.0)
    else:  # the main lobe is too weak for a fit: the known kernel alone
        beta = 0.0

    def model(s):
        s = np.asarray(s, dtype=float)
        return np.asarray(known_transform(s), dtype=float).real * np.exp(-beta * (np.pi * s) ** 2)

    h = 1e-4 * sigma1
    slope_model = float((model(sigma1 + h) - model(sigma1 - h)) / (2 * h))
    tx = _TWO_PI * x
    slope_obs = float(-np.sum(a * tx * np.sin(tx * sigma1)))
    noise = float(np.sqrt(np.sum(b**2 * np.cos(tx * sigma1) ** 2)))
    m = model(grid)
    after = grid > sigma1
    pos = m >= 0
    nxt = np.flatnonzero((pos[1:] != pos[:-1]) & (grid[:-1] > 1.2 * sigma1))  # M's second zero (~1.7 sigma1)
    end = grid[nxt[0]] if nxt.size else grid[-1]
    lobe = after & (grid <= end) & (grid <= sigma_top) & (eta > 0)
    lobe_snr = float(np.max(np.abs(m[lobe]) / eta[lobe])) if lobe.any() else 0.0
    return ZeroCheck(slope_obs, slope_model, noise, lobe_snr, float(math.sqrt(beta)), bool(lobe_snr < threshold))
