"""Convergence and timing study of the surface integrator (vsini.surface); not collected by pytest.

Run:  python tests/benchmarks/bench_surface_convergence.py

It prints, for the rules in ``vsini.surface.default_grid_size``:

1. rigid sphere: kernel pixel means against the closed-form rotation profile (Gray 2005, The
   Observation and Analysis of Stellar Photospheres, 3rd ed., eq. 18.14, number from memory),
   as a function of n_theta, in units of the kernel peak;
2. rigid sphere: line profile (depth 0.5, local Gaussian b) against a quadrature of the same
   closed form convolved with the Gaussian, in units of the continuum, as a function of n_theta;
3. differential rotation (alpha = 0.3, i = 60) and a Roche rotator (omega = 0.95): kernels and
   line profiles against a much finer grid of the integrator itself;
4. wall-clock time of one kernel and one line profile at the default grid.
"""

import time

import numpy as np
from scipy.special import roots_legendre

from vsini.surface import SurfaceModel, default_grid_size, disk_kernel, disk_line_profile

VSINI, DV, WIDTH, DEPTH = 50.0, 0.5, 2.0, 0.5
V = np.linspace(-60.0, 60.0, 241)


def gray_pixel_means(v, vsini, eps):
    """Pixel means of Gray's rotation profile (linear limb darkening), from its antiderivative."""
    dv = v[1] - v[0]

    def antiderivative(x):
        x = np.clip(x, -1, 1)
        s = np.sqrt(1 - x * x)
        return ((1 - eps) * (x * s + np.arcsin(x)) + 0.5 * np.pi * eps * (x - x**3 / 3)) / (np.pi * (1 - eps / 3))

    return (antiderivative((v + dv / 2) / vsini) - antiderivative((v - dv / 2) / vsini)) / dv


def gray_line(v, vsini, eps, depth, width, n=2000):
    """1 - depth sqrt(pi) b (Gray profile convolved with G(v; b)), Gauss-Legendre in x = sin(phi)."""
    nodes, weights = roots_legendre(n)
    phi, w = 0.5 * np.pi * nodes, 0.5 * np.pi * weights
    s = np.cos(phi)
    g = (2 * (1 - eps) * s + 0.5 * np.pi * eps * s**2) / (np.pi * (1 - eps / 3))
    return 1 - depth * np.exp(-(((v[:, None] - vsini * np.sin(phi)[None, :]) / width) ** 2)) @ (g * s * w)


def timed(fn, *args, **kwargs):
    fn(*args, **kwargs)  # warm caches (Gauss-Legendre nodes)
    t0 = time.perf_counter()
    out = fn(*args, **kwargs)
    return out, time.perf_counter() - t0


def rigid_study():
    print(f"Rigid sphere, vsini = {VSINI} km/s, pixel {DV} km/s, eps = 0.6")
    model = SurfaceModel(v_eq_kms=VSINI)
    ref_k = gray_pixel_means(V, VSINI, 0.6)
    ref_l = gray_line(V, VSINI, 0.6, DEPTH, WIDTH)
    print("  kernel  n_theta : max error / peak")
    for n in (50, 100, 200, 400, 800, 1600):
        err = np.max(np.abs(disk_kernel(model, V, n_theta=n) - ref_k)) / ref_k.max()
        print(f"    {n:6d} : {err:.2e}")
    print("  line    n_theta : max error / continuum   (b = 2 km/s)")
    for n in (25, 50, 100, 200):
        err = np.max(np.abs(disk_line_profile(model, V, depth=DEPTH, intrinsic_width_kms=WIDTH, n_theta=n) - ref_l))
        print(f"    {n:6d} : {err:.2e}")
    k, tk = timed(disk_kernel, model, V)
    line, tl = timed(disk_line_profile, model, V, depth=DEPTH, intrinsic_width_kms=WIDTH)
    print(f"  default kernel grid {default_grid_size(model, DV)}: {np.max(np.abs(k - ref_k)) / ref_k.max():.2e}"
          f" of peak, {tk * 1e3:.1f} ms")
    print(f"  default line grid {default_grid_size(model, WIDTH, smooth=True)}: "
          f"{np.max(np.abs(line - ref_l)):.2e} of continuum, {tl * 1e3:.1f} ms")


def nonrigid_study(name, model):
    print(f"{name}: grids against the integrator at a finer grid")
    ref_k = disk_kernel(model, V, n_theta=2400, n_phi=4000)
    ref_l = disk_line_profile(model, V, depth=DEPTH, intrinsic_width_kms=WIDTH, n_theta=800, n_phi=2048)
    print("  kernel  (n_theta, n_phi) : max error / peak")
    for nt, npp in ((400, 256), (400, 512), (800, 512), (800, 1024), (800, 2048)):
        err = np.max(np.abs(disk_kernel(model, V, n_theta=nt, n_phi=npp) - ref_k)) / ref_k.max()
        print(f"    ({nt:4d}, {npp:4d}) : {err:.2e}")
    print("  line    (n_theta, n_phi) : max error / continuum")
    for nt, npp in ((50, 16), (100, 16), (100, 64), (100, 128), (100, 256)):
        line = disk_line_profile(model, V, depth=DEPTH, intrinsic_width_kms=WIDTH, n_theta=nt, n_phi=npp)
        print(f"    ({nt:4d}, {npp:4d}) : {np.max(np.abs(line - ref_l)):.2e}")
    k, tk = timed(disk_kernel, model, V)
    line, tl = timed(disk_line_profile, model, V, depth=DEPTH, intrinsic_width_kms=WIDTH)
    print(f"  default kernel grid {default_grid_size(model, DV)}: {np.max(np.abs(k - ref_k)) / ref_k.max():.2e}"
          f" of peak, {tk:.2f} s")
    print(f"  default line grid {default_grid_size(model, WIDTH, smooth=True)}: "
          f"{np.max(np.abs(line - ref_l)):.2e} of continuum, {tl * 1e3:.1f} ms")


if __name__ == "__main__":
    rigid_study()
    nonrigid_study("Differential rotation alpha = 0.3, i = 60 deg",
                   SurfaceModel(v_eq_kms=VSINI / np.sin(np.radians(60.0)), inclination_deg=60.0, alpha=0.3))
    nonrigid_study("Roche rotator omega = 0.95, i = 90 deg, beta = 0.25",
                   SurfaceModel(v_eq_kms=VSINI, omega_crit_fraction=0.95))
    nonrigid_study("Roche rotator omega = 0.95, i = 60 deg, beta = 0.25",
                   SurfaceModel(v_eq_kms=VSINI / np.sin(np.radians(60.0)), inclination_deg=60.0,
                                omega_crit_fraction=0.95))
