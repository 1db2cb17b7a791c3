"""Limb-darkening laws and the rotation kernel each one implies.

A law gives the specific intensity across the disc, :math:`I(\\mu)/I(1)`, with :math:`\\mu` the cosine of the
angle between the line of sight and the local normal. For a rigidly rotating spherical star every law implies
a rotation kernel (the disc-integrated flux at each Doppler velocity) and that kernel's Fourier transform,
both in closed form for the two laws here. The registry :data:`LAWS` lists them; tests run over it.

References
----------
.. [1] Gray, D. F. 2005, *The Observation and Analysis of Stellar Photospheres*, 3rd ed. (Cambridge Univ.
   Press), ch. 18, eq. 18.14 (rotation profile with linear limb darkening; equation number from memory).
.. [2] Dravins, D., Lindegren, L. & Torkelsson, U. 1990, A&A 237, 137 (volume and page from memory): first
   zero of the rotation kernel's transform as a polynomial in the linear coefficient.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from .errors import InputError

__all__ = [
    "LimbDarkening",
    "LAWS",
    "linear",
    "quadratic",
    "as_limb_darkening",
    "bessel_a",
    "bessel_b",
    "bessel_c",
]

_SMALL = 0.2  # below this |u| the basis functions use their Taylor series (error < 1e-14)


def bessel_a(u):
    """:math:`A(u) = 2 J_1(u)/u`, the transform of a uniform disc's chord profile; A(0) = 1.

    Notes
    -----
    Taylor series to :math:`u^8` for :math:`|u| < 0.2` (truncation error < 1e-14).
    """
    u = np.abs(np.asarray(u, dtype=float))
    small = u < _SMALL
    ul = np.where(small, 1.0, u)
    out = 2.0 * special.j1(ul) / ul
    if small.any():
        us = u[small] ** 2
        out[small] = 1.0 - us / 8.0 + us**2 / 192.0 - us**3 / 9216.0 + us**4 / 737280.0
    return out


def bessel_b(u):
    """:math:`B(u) = 3 j_1(u)/u = 3(\\sin u - u\\cos u)/u^3`, with :math:`j_1` the spherical Bessel function; B(0) = 1.

    Notes
    -----
    :math:`(\\sin u - u\\cos u)/u^3 = j_1(u)/u` (scipy ``special.spherical_jn``). The raw form cancels
    catastrophically near 0, so :math:`|u| < 0.2` uses the Taylor series to :math:`u^8`.
    """
    u = np.abs(np.asarray(u, dtype=float))
    small = u < _SMALL
    ul = np.where(small, 1.0, u)
    out = 3.0 * (np.sin(ul) - ul * np.cos(ul)) / ul**3
    if small.any():
        us = u[small] ** 2
        out[small] = 1.0 - us / 10.0 + us**2 / 280.0 - us**3 / 15120.0 + us**4 / 1330560.0
    return out


def bessel_c(u):
    """:math:`C(u) = 8 J_2(u)/u^2`, the transform of :math:`(1-x^2)^{3/2}` normalised to C(0) = 1.

    Notes
    -----
    Uses :math:`\\int_{-1}^{1}(1-x^2)^{3/2}\\cos(ux)\\,dx = 3\\pi J_2(u)/u^2`. Series
    the Taylor series to :math:`u^8` for :math:`|u| < 0.2`.
    """
    u = np.abs(np.asarray(u, dtype=float))
    small = u < _SMALL
    ul = np.where(small, 1.0, u)
    out = 8.0 * special.jv(2, ul) / ul**2
    if small.any():
        us = u[small] ** 2
        out[small] = 1.0 - us / 12.0 + us**2 / 384.0 - us**3 / 23040.0 + us**4 / 2211840.0
    return out


@dataclass(frozen=True)
class LimbDarkening:
    """A limb-darkening law with its coefficients.

    Use :func:`linear` or :func:`quadratic` (or :func:`as_limb_darkening`) to build one.

    Parameters
    ----------
    law : {'linear', 'quadratic'}
    coefficients : tuple of float
        ``(epsilon,)`` for the linear law :math:`I = 1 - \\epsilon(1-\\mu)`;
        ``(a, b)`` for the quadratic law :math:`I = 1 - a(1-\\mu) - b(1-\\mu)^2`.
    """

    law: str
    coefficients: tuple

    def __post_init__(self):
        if self.law not in LAWS:
            raise InputError(f"limb darkening: unknown law {self.law!r}; choose one of {sorted(LAWS)}")
        n = LAWS[self.law]
        if len(self.coefficients) != n:
            raise InputError(f"limb darkening: the {self.law} law takes {n} coefficient(s), got {self.coefficients!r}")
        coeffs = tuple(float(c) for c in self.coefficients)
        if not all(np.isfinite(coeffs)):
            raise InputError(f"limb darkening: coefficients must be finite, got {coeffs!r}")
        object.__setattr__(self, "coefficients", coeffs)
        # The intensity must stay non-negative over the disc and the law must be limb *darkening* or flat.
        mu = np.linspace(0.0, 1.0, 101)
        if np.any(self.intensity(mu) < -1e-12):
            raise InputError(f"limb darkening: {self.law} coefficients {coeffs} give negative intensity at the limb")

    @property
    def quadratic_coefficients(self):
        """The law written as quadratic coefficients ``(a, b)`` (linear: ``(epsilon, 0)``)."""
        if self.law == "linear":
            return (self.coefficients[0], 0.0)
        return self.coefficients

    @property
    def label(self):
        """Short text for tables and figure legends, e.g. ``'linear 0.60'``."""
        return f"{self.law} " + " ".join(f"{c:.2f}" for c in self.coefficients)

    def intensity(self, mu):
        """Relative intensity :math:`I(\\mu)/I(1)`."""
        a, b = self.quadratic_coefficients
        m = 1.0 - np.asarray(mu, dtype=float)
        return 1.0 - a * m - b * m**2

    def flux_norm(self):
        """:math:`\\int_0^1 2\\mu I(\\mu)\\,d\\mu = 1 - a/3 - b/6`, the disc flux relative to a uniform disc."""
        a, b = self.quadratic_coefficients
        return 1.0 - a / 3.0 - b / 6.0

    def profile(self, x):
        """Rotation kernel in units of the maximum Doppler shift, :math:`\\int_{-1}^{1} G(x)\\,dx = 1`.

        Parameters
        ----------
        x : ndarray
            Doppler velocity divided by :math:`v \\sin i`; the kernel is zero for :math:`|x| > 1`.

        Notes
        -----
        With :math:`s = \\sqrt{1-x^2}`,

        .. math:: G(x) = \\frac{2(1-a-b)s + \\tfrac{\\pi}{2}(a+2b)s^2 - \\tfrac{4}{3}b s^3}{\\pi(1 - a/3 - b/6)}

        from the chord integrals :math:`\\int dy = 2s`, :math:`\\int\\mu\\,dy = \\pi s^2/2`,
        :math:`\\int\\mu^2 dy = 4s^3/3` across the disc. For b = 0 it is Gray's profile [1]_ (eq. 18.14).
        """
        a, b = self.quadratic_coefficients
        x = np.asarray(x, dtype=float)
        s2 = np.clip(1.0 - x**2, 0.0, None)
        s = np.sqrt(s2)
        num = 2.0 * (1.0 - a - b) * s + 0.5 * np.pi * (a + 2.0 * b) * s2 - (4.0 / 3.0) * b * s2 * s
        return num / (np.pi * self.flux_norm())

    def cdf(self, x):
        r""":math:`\int_{-1}^{x} G(t)\,dt`, the cumulative rotation kernel (0 below -1, 1 above +1).

        Notes
        -----
        Closed-form antiderivatives of :math:`s`, :math:`s^2` and :math:`s^3` (:math:`s=\sqrt{1-t^2}`):
        :math:`\tfrac12(xs + \arcsin x)`, :math:`x - x^3/3` and
        :math:`\tfrac14 x s^3 + \tfrac38 x s + \tfrac38\arcsin x`, each shifted to vanish at x = -1.
        Used for exact pixel integrals of the pure rotation kernel.
        """
        a, b = self.quadratic_coefficients
        x = np.clip(np.asarray(x, dtype=float), -1.0, 1.0)
        s = np.sqrt(1.0 - x**2)
        asin = np.arcsin(x)
        i1 = 0.5 * (x * s + asin) + 0.25 * np.pi
        i2 = x - x**3 / 3.0 + 2.0 / 3.0
        i3 = 0.25 * x * s**3 + 0.375 * x * s + 0.375 * asin + 0.1875 * np.pi
        num = 2.0 * (1.0 - a - b) * i1 + 0.5 * np.pi * (a + 2.0 * b) * i2 - (4.0 / 3.0) * b * i3
        return num / (np.pi * self.flux_norm())

    def transform(self, u):
        """Fourier transform of :meth:`profile`, with :math:`u = 2\\pi\\sigma v\\sin i`; equals 1 at u = 0.

        Notes
        -----
        .. math:: g(u) = \\frac{(1-a-b)A(u) + \\tfrac{2}{3}(a+2b)B(u) - \\tfrac{b}{2}C(u)}{1 - a/3 - b/6}

        with :math:`A = 2J_1(u)/u`, :math:`B = 3j_1(u)/u`, :math:`C = 8J_2(u)/u^2` (:func:`bessel_a`,
        :func:`bessel_b`, :func:`bessel_c`). For b = 0 this is the transform of Gray's profile [1]_.
        """
        a, b = self.quadratic_coefficients
        u = np.asarray(u, dtype=float)
        out = (1.0 - a - b) * bessel_a(u)
        if a + 2.0 * b != 0.0:
            out = out + (2.0 / 3.0) * (a + 2.0 * b) * bessel_b(u)
        if b != 0.0:
            out = out - 0.5 * b * bessel_c(u)
        return out / self.flux_norm()

    def transform_zeros(self, count=2):
        """The first ``count`` zeros :math:`q_k` of the transform, in :math:`\\sigma v\\sin i` (cycles).

        The first zero of the Fourier transform of a rotationally broadened line lies at
        :math:`\\sigma_1 = q_1 / (v \\sin i)` (Carroll 1933; [2]_).

        Returns
        -------
        (count,) ndarray
            :math:`q_k = u_k / 2\\pi` with :math:`u_k` the k-th positive root of :meth:`transform`,
            bracketed on a fine grid and refined with Brent's method to 1e-12.
        """
        from scipy.optimize import brentq

        u = np.linspace(1e-3, 4.0 * np.pi * (count + 1), 4000 * (count + 1))
        g = self.transform(u)
        idx = np.nonzero(np.sign(g[:-1]) * np.sign(g[1:]) < 0)[0]
        if len(idx) < count:  # pragma: no cover - every physical law has zeros here
            raise InputError(f"limb darkening {self.label}: transform has fewer than {count} zeros")
        roots = [
            brentq(lambda x: float(self.transform(np.array([x]))[0]), u[i], u[i + 1], xtol=1e-14) for i in idx[:count]
        ]
        return np.asarray(roots) / (2.0 * np.pi)


#: Registered laws and their number of coefficients.
LAWS = {"linear": 1, "quadratic": 2}


def linear(epsilon=0.6):
    """Linear law :math:`I = 1 - \\epsilon(1-\\mu)`; 0.6 is the usual optical default (common practice)."""
    return LimbDarkening("linear", (epsilon,))


def quadratic(a, b):
    """Quadratic law :math:`I = 1 - a(1-\\mu) - b(1-\\mu)^2`."""
    return LimbDarkening("quadratic", (a, b))


def as_limb_darkening(value):
    """Turn a user value into a :class:`LimbDarkening`.

    Accepts a :class:`LimbDarkening`, a number (linear coefficient), a string ``'0.6'`` or
    ``'0.4,0.25'`` (two numbers: quadratic ``a,b``), or a tuple ``('linear', eps)`` /
    ``('quadratic', a, b)`` / ``(a, b)``.
    """
    if isinstance(value, LimbDarkening):
        return value
    if value is None:
        return linear()
    if isinstance(value, str):
        parts = [p for p in value.replace(";", ",").replace(" ", ",").split(",") if p]
        try:
            nums = [float(p) for p in parts]
        except ValueError:
            raise InputError(
                f"limb darkening: cannot read {value!r}; give one number (linear epsilon) or 'a,b' (quadratic)"
            ) from None
        value = tuple(nums)
    if isinstance(value, (int, float, np.floating)):
        return linear(float(value))
    value = tuple(value)
    if value and isinstance(value[0], str):
        return LimbDarkening(value[0], tuple(value[1:]))
    if len(value) == 1:
        return linear(value[0])
    if len(value) == 2:
        return quadratic(*value)
    raise InputError(f"limb darkening: cannot read {value!r}")
