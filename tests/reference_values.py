"""Reference values for the kernel tests, each with its source.

Status words follow the project's reference notes: "published" (a value printed in the source),
"from memory" (a published value recalled, not re-read here), "closed form" (a formula evaluated with
scipy.special), "common practice" (a fact of the trade with no single source).
"""

import numpy as np
from scipy import optimize, special

# First two zeros of the linear-limb-darkening rotation transform, in sigma * vsini (cycles).
# eps = 0: g(u) = 2 J1(u)/u, zeros at the zeros of J1 (scipy.special.jn_zeros) / (2 pi).
Q_EPS0 = special.jn_zeros(1, 2) / (2.0 * np.pi)
# eps = 1: g(u) = 3 (sin u - u cos u)/u^3, zeros where tan u = u (first two positive roots).
Q_EPS1 = np.array(
    [optimize.brentq(lambda u: np.tan(u) - u, np.pi + 1e-9, 1.5 * np.pi - 1e-9, xtol=1e-15),
     optimize.brentq(lambda u: np.tan(u) - u, 2 * np.pi + 1e-9, 2.5 * np.pi - 1e-9, xtol=1e-15)]
) / (2.0 * np.pi)


def q1_dravins_1990(eps):
    """First zero q1 = sigma1 * vsini for linear limb darkening.

    Polynomial of Dravins, Lindegren & Torkelsson 1990, A&A 237, 137 (coefficients from memory, confirmed
    against exact zeros to 2e-4 in the project's reference notes).
    """
    return 0.610 + 0.062 * eps + 0.027 * eps**2 + 0.012 * eps**3 + 0.004 * eps**4


# Gray 2005 (The Observation and Analysis of Stellar Photospheres, 3rd ed., ch. 18; from memory):
# q1 = 0.660 at eps = 0.6.
Q1_GRAY_EPS06 = 0.660

# Rigid-rotation ratio q2/q1 for linear limb darkening, computed from the closed-form transform
# (project reference notes, section 3; Reiners & Schmitt 2002, A&A 384, 155 quote ~1.76 at eps = 0.6).
Q2Q1_RIGID = {0.0: 1.831, 0.6: 1.761, 1.0: 1.719}

# Quadratic-law example zeros (closed form derived in the reference notes, section 4; computed, no
# published table located): (a, b) = (0.4, 0.25) -> q1 = 0.6551, q2/q1 = 1.7775.
Q_QUADRATIC_EXAMPLE = {"ab": (0.4, 0.25), "q1": 0.6551, "q2_over_q1": 1.7775}
