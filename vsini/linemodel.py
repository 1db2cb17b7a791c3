"""The forward model of a set of line windows, evaluated on the windows' pixels (used by :mod:`vsini.fit`).

:class:`JointModel` turns the shared broadening parameters (v sin i, radial velocity, macroturbulence,
optionally the intrinsic width), one strength (equivalent width) per feature, optionally one centre shift
per feature, and a linear continuum per window into model fluxes on the good pixels of every window
(:class:`vsini.lines.LineWindow`). The line profiles come from :func:`vsini.model.synthesize` on a fine
grid uniform in log-velocity and are integrated over the data pixels, so the data are never resampled.
"""

from __future__ import annotations

import copy
import math

import numpy as np
from scipy import fft as _fft
from scipy import sparse

from . import kernels as K
from .errors import InputError
from .grid import C_KMS
from .limbdark import as_limb_darkening
from .model import RT_MODES, Broadening, padded_length, synthesize

__all__ = ["JointModel"]

_NONLINEAR = ("vsini", "rv", "macro", "bint")
_SHIFT_STEP = 2e-3  # km/s: forward-difference step for the radial velocity and the centre shifts


class JointModel:
    """The forward model of a set of line windows, evaluated on the windows' good pixels.

    Parameters
    ----------
    windows : sequence of LineWindow
    limb_darkening : LimbDarkening
    resolution : float or None
    lsf : TabulatedLSF or None
    intrinsic_widths : (F,) ndarray or None
        Doppler width of every feature (km/s), or None when the intrinsic width is a free parameter ``bint``.
    macro_kind : {'rt', 'gaussian'}
    rt_mode : {'joint', 'product'}
        How radial-tangential macroturbulence and rotation combine (:class:`vsini.model.Broadening`):
        the exact disc integral or the faster product of their transforms.
    free_centres : bool
        Give every feature its own centre shift ``du{f}`` (km/s of log-velocity, on top of the shared
        radial velocity): for line centres that are measured (detected), not laboratory wavelengths.
    shift_bound_kms : float
        The fit keeps every centre shift within +-this (km/s); used only with ``free_centres``.
    oversample : int
        Fine cells per pixel when the pixels are not uniform in log-wavelength.

    Notes
    -----
    The fine grid (step ``dv``) is uniform in :math:`u = c\\ln\\lambda`; each fine cell holds the exact
    cell mean from :func:`vsini.model.synthesize`. Their running sum is the exact integral at the cell
    edges; a 4-point Lagrange interpolation of that integral at the data-pixel edges gives pixel means
    (exact when the pixels are the cells, i.e. for a log-uniform spectrum).

    The composed transform depends only on (v sin i, macroturbulence, intrinsic width); it is cached,
    so steps that change only strengths, continua, the radial velocity or the centre shifts cost one
    phase product and one inverse FFT.
    """

    def __init__(self, windows, *, limb_darkening, resolution, lsf, intrinsic_widths, macro_kind="rt",
                 rt_mode="joint", free_centres=False, shift_bound_kms=0.0, oversample=4):
        if rt_mode not in RT_MODES:
            raise InputError(f"JointModel: rt_mode must be one of {RT_MODES}, got {rt_mode!r}")
        self.windows = tuple(windows)
        self.limb_darkening = as_limb_darkening(limb_darkening)
        self.resolution, self.lsf, self.macro_kind, self.rt_mode = resolution, lsf, macro_kind, rt_mode
        self.free_centres, self.shift_bound = bool(free_centres), float(shift_bound_kms)
        self.features = [(w, ln) for w, win in enumerate(self.windows) for ln in win.lines]
        self.n_windows, self.n_features = len(self.windows), len(self.features)
        self.feature_b = None if intrinsic_widths is None else np.asarray(intrinsic_widths, dtype=float)
        steps = np.concatenate([np.diff(win.u_edges) for win in self.windows])
        uniform = np.all(np.abs(steps / steps[0] - 1.0) < 1e-6)
        self.dv = float(steps[0]) if uniform else float(steps.min()) / oversample
        self.n_fine = max(int(math.ceil((win.u_edges[-1] - win.u_edges[0]) / self.dv)) for win in self.windows) + 4
        rows, y, err, x, win_idx, mats = [], [], [], [], [], []
        start = 0
        for w, win in enumerate(self.windows):
            good = np.flatnonzero(win.good)
            e0 = win.u_edges[0] - 2.0 * self.dv
            mats.append(_pixel_mean_matrix(win.u_edges, good, e0, self.dv, self.n_fine + 1))
            rows.append(slice(start, start + good.size))
            start += good.size
            y.append(win.flux[good])
            err.append(None if win.flux_err is None else win.flux_err[good])
            u = win.u[good]
            half = 0.5 * (win.u[-1] - win.u[0])
            x.append((u - 0.5 * (win.u[-1] + win.u[0])) / half)
            win_idx.append(np.full(good.size, w))
        self.rows, self.mats = rows, mats
        # one sparse product for all features: feature f's block maps its running integral to its window's pixels
        self._pixel_map = sparse.block_diag([mats[w] for w, _ in self.features], format="csr")
        self._out_rows = np.concatenate([np.arange(rows[w].start, rows[w].stop) for w, _ in self.features])
        self._out_cols = np.concatenate([np.full(rows[w].stop - rows[w].start, f) for f, (w, _) in enumerate(self.features)])
        self.y = np.concatenate(y)
        self.err = None if any(e is None for e in err) else np.concatenate(err)
        self.x, self.win = np.concatenate(x), np.concatenate(win_idx)
        self.n_data = self.y.size
        offs, wts, feat = [], [], []
        for f, (w, ln) in enumerate(self.features):
            o, wt = ln.offsets_kms(self.windows[w].reference)
            cell0 = self.windows[w].u_edges[0] - 1.5 * self.dv  # centre of fine cell 0
            offs.append(o - cell0)
            wts.append(wt)
            feat.append(np.full(o.size, f))
        self.comp_offset, self.comp_weight, self.comp_feature = map(np.concatenate, (offs, wts, feat))
        self._cache, self._transforms = {}, {}

    def with_rt_mode(self, rt_mode):
        """The same model (windows, pixels, features) with another ``rt_mode``; caches start empty."""
        if rt_mode not in RT_MODES:
            raise InputError(f"JointModel: rt_mode must be one of {RT_MODES}, got {rt_mode!r}")
        return self._copy(rt_mode=rt_mode)

    def with_intrinsic_widths(self, intrinsic_widths):
        """The same model with other fixed intrinsic widths (km/s, one per feature); caches start empty."""
        b = np.asarray(intrinsic_widths, dtype=float)
        if b.shape != (self.n_features,) or not np.all(np.isfinite(b) & (b > 0)):
            raise InputError(f"JointModel: give {self.n_features} positive intrinsic widths, got {intrinsic_widths!r}")
        return self._copy(feature_b=b)

    def _copy(self, **changes):
        """A shallow copy with ``changes`` applied and empty caches (they depend on the changed settings)."""
        out = copy.copy(self)
        out.__dict__.update(changes)
        out._cache, out._transforms = {}, {}
        return out

    # -- parameters -----------------------------------------------------------------------------
    def ew_names(self):
        """Names of the equivalent-width parameters, one per feature."""
        return [f"ew{f}" for f in range(self.n_features)]

    def shift_names(self):
        """Names of the per-feature centre shifts ``du{f}`` (km/s); empty unless ``free_centres``."""
        return [f"du{f}" for f in range(self.n_features)] if self.free_centres else []

    def continuum_names(self):
        """Names of the continuum parameters ``c0_w`` (level) and ``c1_w`` (slope), per window."""
        return [f"c{k}_{w}" for w in range(self.n_windows) for k in (0, 1)]

    @property
    def gauss_b(self):
        """Largest Gaussian 1/e half-width (km/s) of instrument and fixed intrinsic widths in quadrature."""
        b_int = 0.0 if self.feature_b is None else float(self.feature_b.max())
        b_ins = K.instrument_width(self.resolution) if self.resolution else 0.0
        return math.hypot(b_int, b_ins)

    def shifts(self, values):
        """The per-feature centre shifts (F,) km/s from a dict of values (zeros unless ``free_centres``)."""
        if not self.free_centres:
            return np.zeros(self.n_features)
        return np.array([values[n] for n in self.shift_names()], dtype=float)

    # -- evaluation -----------------------------------------------------------------------------
    def _transform(self, vsini, macro, bg, b_max):
        """Composed transform (pixel response included) on the padded grid, cached by (v sin i, zeta, b)."""
        key = (vsini, macro, bg, b_max)
        hit = self._transforms.get(key)
        if hit is not None:
            return hit
        br = Broadening(vsini=max(vsini, 0.0), limb_darkening=self.limb_darkening, intrinsic_width=b_max,
                        macroturbulence=max(macro, 0.0), macro_kind=self.macro_kind, rt_mode=self.rt_mode,
                        resolution=self.resolution, lsf=self.lsf)
        npad = padded_length(self.n_fine, self.dv, br)
        sigma = _fft.rfftfreq(npad, self.dv)
        base_key = ("base", vsini, macro, npad)  # the costly part does not depend on the intrinsic width
        base = self._transforms.get(base_key)
        if base is None:  # rotation x macroturbulence x instrument x pixel, without the intrinsic Gaussian
            base = np.zeros(sigma.size, dtype=complex if self.lsf is not None else float)
            keep = sigma.size
            if self.lsf is None and br.instrument_b > 0:  # beyond here the instrument's Gaussian is < 1e-13
                keep = int(np.searchsorted(sigma, math.sqrt(13.0 * math.log(10.0)) / (math.pi * br.instrument_b))) + 1
            base[:keep] = br.with_(intrinsic_width=0.0).transform(sigma[:keep]) * K.pixel_transform(sigma[:keep], self.dv)
            self._transforms[base_key] = base
        out = (br, base * K.gaussian_transform(sigma, bg))
        if len(self._transforms) > 64:
            self._transforms.clear()
        self._transforms[key] = out
        return out

    def profiles(self, vsini, rv, macro, bint=None, shifts=None):
        """Unit-strength feature profiles on the data pixels, (N, F) (zero outside each feature's window).

        ``shifts`` (F,) km/s moves each feature on top of the radial velocity (None: no shifts).
        """
        sh = None if shifts is None else np.asarray(shifts, dtype=float)
        key = (float(vsini), float(rv), float(macro), None if bint is None else float(bint),
               None if sh is None or not sh.any() else sh.tobytes())
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        b = self.feature_b if bint is None else np.full(self.n_features, float(bint))
        b_max = float(b.max())
        u_rv = C_KMS * math.log1p(rv / C_KMS)
        offsets = self.comp_offset + u_rv
        if key[4] is not None:
            offsets = offsets + sh[self.comp_feature]
        fine = np.empty((self.n_features, self.n_fine))
        for bg in np.unique(b):
            br, transform = self._transform(key[0], key[2], float(bg), b_max)
            fsel = np.flatnonzero(b == bg)
            local = np.full(self.n_features, -1)
            local[fsel] = np.arange(fsel.size)
            csel = local[self.comp_feature] >= 0
            fine[fsel] = synthesize(br, self.dv, self.n_fine, offsets[csel], self.comp_weight[csel],
                                    line_window=local[self.comp_feature[csel]], n_windows=fsel.size,
                                    transform=transform)
        cum = np.zeros((self.n_features, self.n_fine + 1))
        np.cumsum(fine, axis=1, out=cum[:, 1:])
        cum *= self.dv
        out = np.zeros((self.n_data, self.n_features))
        out[self._out_rows, self._out_cols] = self._pixel_map @ cum.ravel()
        if len(self._cache) > 32:
            self._cache.clear()
        self._cache[key] = out
        return out

    def evaluate(self, values):
        """Model flux on the good pixels of all windows, for a dict of parameter values."""
        return self._parts(values)[0]

    def _parts(self, values):
        prof = self.profiles(values["vsini"], values["rv"], values.get("macro", 0.0), values.get("bint"),
                             self.shifts(values) if self.free_centres else None)
        ew = np.array([values[n] for n in self.ew_names()])
        c0 = np.array([values[f"c0_{w}"] for w in range(self.n_windows)])
        c1 = np.array([values[f"c1_{w}"] for w in range(self.n_windows)])
        one_minus_d = 1.0 - prof @ ew
        cont = c0[self.win] + c1[self.win] * self.x
        return cont * one_minus_d, prof, ew, cont, one_minus_d

    def jacobian(self, values, names):
        """Derivatives (N, len(names)) of the model flux.

        Analytic for strengths and continua; forward differences for the shared nonlinear parameters;
        for the centre shifts one extra evaluation serves all features, since each feature's profile
        depends only on its own shift.
        """
        model, prof, ew, cont, omd = self._parts(values)
        cols = []
        shifted_prof = None
        for name in names:
            if name.startswith("ew"):
                cols.append(-cont * prof[:, int(name[2:])])
            elif name.startswith("c0_") or name.startswith("c1_"):
                w = int(name[3:])
                cols.append(np.where(self.win == w, omd * (1.0 if name[1] == "0" else self.x), 0.0))
            elif name.startswith("du") and self.free_centres:
                if shifted_prof is None:
                    shifted_prof = self.profiles(values["vsini"], values["rv"], values.get("macro", 0.0),
                                                 values.get("bint"), self.shifts(values) + _SHIFT_STEP)
                f = int(name[2:])
                cols.append(-cont * ew[f] * (shifted_prof[:, f] - prof[:, f]) / _SHIFT_STEP)
            elif name in _NONLINEAR:
                h = _SHIFT_STEP if name == "rv" else 1e-3 * max(abs(values[name]), 0.5)
                shifted = dict(values, **{name: values[name] + h})
                cols.append((self.evaluate(shifted) - model) / h)
            else:
                raise InputError(f"jacobian: unknown parameter {name!r}")
        return np.column_stack(cols)


def _pixel_mean_matrix(u_edges, good, e0, dv, n_nodes):
    """Sparse (n_good, n_nodes) matrix: pixel means from the running integral at nodes ``e0 + k dv``."""
    t = (np.asarray(u_edges) - e0) / dv
    k = np.clip(np.floor(t).astype(int) - 1, 0, n_nodes - 4)
    s = t - k  # position within the 4-node stencil k..k+3
    nodes = np.arange(4.0)
    lag = np.ones((t.size, 4))
    for j in range(4):
        for m in range(4):
            if m != j:
                lag[:, j] *= (s - nodes[m]) / (nodes[j] - nodes[m])
    lag[np.abs(lag) < 1e-13] = 0.0  # exact node hits give clean identity rows
    width = dv * np.diff(t)
    good = np.asarray(good)
    rows = np.repeat(np.arange(good.size), 8)
    cols = np.concatenate([k[good][:, None] + np.arange(4), k[good + 1][:, None] + np.arange(4)], axis=1).ravel()
    vals = (np.concatenate([-lag[good], lag[good + 1]], axis=1) / width[good][:, None]).ravel()
    return sparse.csr_matrix((vals, (rows, cols)), shape=(good.size, n_nodes))
