"""Bias of the apparent v sin i of surface-integrated stars (not collected by pytest).

Run ``python tests/benchmarks/bench_sensitivity.py``; it prints the tables quoted in docs/surface-model.md and
docs/inclination.md. Everything is computed by :func:`vsini.sensitivity.sensitivity_study` with its defaults
(three lines at 4500/5000/5500 A of depth 0.5, intrinsic width 2 km/s, R = 60 000, 3 pixels per c/R,
linear limb darkening 0.6, noiseless spectra) unless stated:

1. Roche rotators (rigid, von Zeipel beta = 0.25, bolometric T^4 intensities) of 3 M_sun and polar radius
   2.5 R_sun (v_crit = 391 km/s) at omega = 0.5 ... 0.99 and i = 30, 60, 90 deg; then the same with Planck
   intensities for T_pole = 15 000 K.
2. Solar-like differential rotation alpha = 0.1, 0.2, 0.3 at v_eq = 60 km/s and i = 30, 60, 90 deg.
"""

import time

from vsini.sensitivity import sensitivity_study

INCLINATIONS = (30.0, 60.0, 90.0)


def show(label, result):
    for row in result.records():
        print(
            f"{label:<34} i={row['inclination_deg']:4.0f}  v sin i = {row['vsini_true']:7.2f}  "
            f"fit {100 * row['fit_bias']:+6.1f} %  Fourier {100 * row['fourier_bias']:+6.1f} %  "
            f"q2/q1 {row['q2_q1']:.3f}"
        )


def main():
    t0 = time.time()
    for teff in (None, 15000.0):
        for omega in (0.5, 0.8, 0.9, 0.95, 0.99):
            r = sensitivity_study(omega_crit_fraction=omega, mass_msun=3.0, radius_rsun=2.5,
                                  inclinations_deg=INCLINATIONS, teff_pole_k=teff)
            kind = "bolometric" if teff is None else f"Planck {teff:.0f} K"
            show(f"omega={omega} v/vcrit={r.v_eq_kms / r.v_crit_kms:.2f} {kind}", r)
    for alpha in (0.1, 0.2, 0.3):
        show(f"alpha={alpha} v_eq=60", sensitivity_study(v_eq_kms=60.0, alpha=alpha, inclinations_deg=INCLINATIONS))
    show("rigid sphere v_eq=60", sensitivity_study(v_eq_kms=60.0, inclinations_deg=INCLINATIONS))
    print(f"{time.time() - t0:.1f} s")


if __name__ == "__main__":
    main()
