"""Kernels against published formulas, closed forms and brute-force integrals.

Sources are named beside each check; see tests/reference_values.py.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from reference_values import Q1_GRAY_EPS06, Q2Q1_RIGID, Q_EPS0, Q_EPS1, Q_QUADRATIC_EXAMPLE, q1_dravins_1990
from scipy import integrate, special

from vsini import _jointrt
from vsini import kernels as K
from vsini.errors import InputError
from vsini.grid import C_KMS
from vsini.limbdark import LAWS, LimbDarkening, as_limb_darkening, linear, quadratic
from vsini.model import Broadening, TabulatedLSF, composed_kernel, equivalent_width_from_depth, synthesize

LAW_EXAMPLES = [linear(0.0), linear(0.6), linear(1.0), quadratic(0.4, 0.25), quadratic(0.3, 0.3)]
assert {ld.law for ld in LAW_EXAMPLES} == set(LAWS)  # every registered law is exercised


def _disc_chord(x, ld):
    """Brute-force chord integral across a limb-darkened disc: int I(mu(x, y)) dy (no closed form used)."""
    if abs(x) >= 1:
        return 0.0
    h = np.sqrt(1 - x * x)
    return integrate.quad(lambda y: ld.intensity(np.sqrt(max(1 - x * x - y * y, 0.0))), -h, h, epsabs=1e-13)[0]


@pytest.mark.parametrize("ld", LAW_EXAMPLES, ids=lambda ld: ld.label)
def test_rotation_profile_is_the_disc_integral(ld):
    """Gray (2005, eq. 18.14; from memory) for the linear law, and its quadratic extension, equal the flux
    of a limb-darkened disc in strips of constant Doppler shift, normalised to unit area."""
    norm = integrate.quad(lambda x: _disc_chord(x, ld), -1, 1, epsabs=1e-12)[0]
    for x in (-0.95, -0.5, 0.0, 0.3, 0.8, 0.999):
        assert ld.profile(np.array([x]))[0] == pytest.approx(_disc_chord(x, ld) / norm, rel=1e-8)
    assert ld.profile(np.array([1.2, -1.5])).tolist() == [0.0, 0.0]


@pytest.mark.parametrize("eps", [0.0, 0.3, 0.6, 1.0])
def test_gray_linear_profile_coefficients(eps):
    """Gray (2005): G = c1 sqrt(1-x^2) + c2 (1-x^2), c1 = 2(1-eps)/(pi (1-eps/3)), c2 = eps/(2(1-eps/3))
    (per unit x; project reference notes section 1)."""
    x = np.linspace(-1, 1, 41)
    c1 = 2 * (1 - eps) / (np.pi * (1 - eps / 3))
    c2 = eps / (2 * (1 - eps / 3))
    np.testing.assert_allclose(linear(eps).profile(x), c1 * np.sqrt(1 - x**2) + c2 * (1 - x**2), atol=1e-15)
    assert integrate.quad(lambda t: linear(eps).profile(np.array([t]))[0], -1, 1)[0] == pytest.approx(1, abs=1e-10)


@pytest.mark.parametrize("ld", LAW_EXAMPLES, ids=lambda ld: ld.label)
def test_closed_form_transform_matches_numerical_transform(ld):
    """The Bessel-function transform equals the cosine transform of the profile done by quadrature."""
    for u in (0.0, 0.05, 1.0, 3.0, 7.5, 15.0):
        num = integrate.quad(lambda x, u=u: ld.profile(np.array([x]))[0] * np.cos(u * x), -1, 1, epsabs=1e-13, limit=200)[0]
        assert ld.transform(np.array([u]))[0] == pytest.approx(num, abs=1e-10)


@pytest.mark.parametrize("ld", LAW_EXAMPLES, ids=lambda ld: ld.label)
def test_cdf_gives_exact_bin_integrals(ld):
    """The closed-form cumulative kernel equals the quadrature of the profile."""
    for x in (-0.7, 0.0, 0.55, 1.0):
        num = integrate.quad(lambda t: ld.profile(np.array([t]))[0], -1, x, epsabs=1e-13)[0]
        assert ld.cdf(np.array([x]))[0] == pytest.approx(num, abs=1e-11)


def test_bessel_series_join_smoothly():
    """Taylor branches near u = 0 agree with scipy.special (J1, spherical j1, J2) where both are valid."""
    from vsini.limbdark import bessel_a, bessel_b, bessel_c

    u = np.array([0.19999, 0.20001, 0.1, 0.5])
    np.testing.assert_allclose(bessel_a(u), 2 * special.j1(u) / u, rtol=1e-12)
    np.testing.assert_allclose(bessel_b(u), 3 * special.spherical_jn(1, u) / u, rtol=1e-10)
    np.testing.assert_allclose(bessel_c(u), 8 * special.jv(2, u) / u**2, rtol=1e-10)
    assert bessel_a(np.array([0.0]))[0] == bessel_b(np.array([0.0]))[0] == bessel_c(np.array([0.0]))[0] == 1.0


def test_first_two_zeros_at_eps0_are_bessel_zeros():
    """eps = 0: zeros of 2 J1(u)/u, i.e. scipy.special.jn_zeros(1, 2) / (2 pi), to 1e-6."""
    np.testing.assert_allclose(linear(0.0).transform_zeros(2), Q_EPS0, atol=1e-6)


def test_first_two_zeros_at_eps1_solve_tan_x_eq_x():
    """eps = 1: zeros of 3(sin u - u cos u)/u^3, the roots of tan u = u, divided by 2 pi, to 1e-6."""
    np.testing.assert_allclose(linear(1.0).transform_zeros(2), Q_EPS1, atol=1e-6)


@pytest.mark.parametrize("eps", np.linspace(0, 1, 11))
def test_first_zero_matches_dravins_1990_polynomial(eps):
    """Dravins, Lindegren & Torkelsson (1990) polynomial q1(eps), to 0.2 %."""
    assert linear(eps).transform_zeros(1)[0] == pytest.approx(q1_dravins_1990(eps), rel=2e-3)


def test_gray_first_zero_and_rigid_ratio():
    """Gray (2005; from memory): q1 = 0.660 at eps = 0.6; q2/q1 = 1.761 (Reiners & Schmitt 2002 quote ~1.76)."""
    q = linear(0.6).transform_zeros(2)
    assert q[0] == pytest.approx(Q1_GRAY_EPS06, abs=5e-4)
    for eps, ratio in Q2Q1_RIGID.items():
        q = linear(eps).transform_zeros(2)
        assert q[1] / q[0] == pytest.approx(ratio, abs=1e-3)


def test_quadratic_law_zeros():
    """Quadratic-law zeros from the closed form (project reference notes section 4, computed)."""
    q = quadratic(*Q_QUADRATIC_EXAMPLE["ab"]).transform_zeros(2)
    assert q[0] == pytest.approx(Q_QUADRATIC_EXAMPLE["q1"], abs=2e-4)
    assert q[1] / q[0] == pytest.approx(Q_QUADRATIC_EXAMPLE["q2_over_q1"], abs=5e-4)
    # b = 0 reduces to the linear law
    np.testing.assert_allclose(quadratic(0.6, 0.0).transform(np.linspace(0, 20, 50)), linear(0.6).transform(np.linspace(0, 20, 50)))


def test_instrument_gaussian_fwhm_is_c_over_r():
    """Common practice: a spectrograph of resolving power R has an instrument profile of FWHM c/R."""
    for R in (20000, 50000, 115000):
        b = K.instrument_width(R)
        v = np.linspace(-3 * b, 3 * b, 200001)
        y = K.gaussian_profile(v, b)
        above = v[y >= y.max() / 2]
        assert above[-1] - above[0] == pytest.approx(C_KMS / R, rel=1e-4)


def test_doppler_width_thermal_plus_micro():
    """b^2 = 2kT/m + xi^2 (Gray 2005 ch. 11): iron at 5800 K, xi = 0 gives sqrt(2 k T / (55.845 u)) = 1.3149 km/s
    (closed form with CODATA k and u)."""
    assert K.doppler_width(5800.0, element="Fe") == pytest.approx(
        np.sqrt(2 * 1.380649e-23 * 5800 / (55.845 * 1.66053906660e-27)) / 1e3, rel=1e-6
    )
    assert K.doppler_width(5800.0, element="Fe", microturbulence=1.0) == pytest.approx(
        np.hypot(K.doppler_width(5800.0, element="Fe"), 1.0)
    )
    with pytest.raises(InputError, match="unknown element 'Xx'"):
        K.doppler_width(5800.0, element="Xx")
    with pytest.raises(InputError, match="non-negative"):
        K.doppler_width(-5.0)


def test_voigt_composition_matches_scipy():
    """The FFT-composed Voigt intrinsic profile equals scipy.special.voigt_profile at the sample points."""
    b, a = 2.0, 0.3
    v = np.arange(-60, 60.001, 0.1)
    ours = Broadening(intrinsic_width=b, damping=a).profile(v)
    np.testing.assert_allclose(ours, special.voigt_profile(v, b / np.sqrt(2), a * b), atol=2e-6)


def test_gaussian_widths_add_in_quadrature():
    """Convolving Gaussians adds their widths in quadrature (closed form)."""
    v = np.arange(-40, 40.001, 0.05)
    prof = Broadening(intrinsic_width=2.0, resolution=50000, macroturbulence=3.0, macro_kind="gaussian").profile(v)
    btot = np.sqrt(2.0**2 + K.instrument_width(50000) ** 2 + 3.0**2)
    np.testing.assert_allclose(prof, K.gaussian_profile(v, btot), atol=1e-9)


def _rt_disc_brute(v, zeta, radial):
    """Radial-tangential kernel as the disc average of local Gaussians, uniform disc (Gray 2005 ch. 17)."""
    def f(mu):
        wr, wt = zeta * mu, zeta * np.sqrt(1 - mu * mu)
        g = lambda w: np.exp(-((v / w) ** 2)) / (np.sqrt(np.pi) * w) if w > 1e-12 else 0.0  # noqa: E731
        return 2 * mu * (radial * g(wr) + (1 - radial) * g(wt))
    return integrate.quad(f, 0, 1, epsabs=1e-13, limit=200)[0]


@pytest.mark.parametrize("radial", [0.5, 0.8])
def test_rt_closed_form_is_the_disc_average(radial):
    for v in (0.3, 1.0, 2.5, 6.0):
        assert K.rt_profile(np.array([v]), 3.0, radial)[0] == pytest.approx(_rt_disc_brute(v, 3.0, radial), rel=1e-7)
    s = np.array([0.0, 0.02, 0.1, 0.4])
    num = [integrate.quad(lambda x, si=si: 2 * K.rt_profile(np.array([x]), 3.0, radial)[0] * np.cos(2 * np.pi * si * x),
                          0, 60, limit=400, epsabs=1e-12)[0] for si in s]
    np.testing.assert_allclose(K.rt_transform(s, 3.0, radial), num, atol=1e-8)


def test_joint_rotation_rt_limits():
    """zeta -> 0 gives the rotation transform; vsini = 0 on a uniform disc gives the RT transform."""
    s = np.linspace(0, 0.3, 301)
    np.testing.assert_allclose(K.rotation_rt_transform(s, 30.0, 1e-9, 0.6), K.rotation_transform(s, 30.0, 0.6), atol=1e-12)
    np.testing.assert_allclose(K.rotation_rt_transform(s, 0.0, 4.0, 0.0), K.rt_transform(s, 4.0), atol=1e-12)


def test_joint_kernel_by_direct_disc_integration():
    """The joint rotation + RT transform equals a brute-force 2-D disc integral of the local profiles'
    transforms times the Doppler phase (independent of the J0 reduction)."""
    vsini, zeta, ld = 20.0, 6.0, linear(0.6)
    for s in (0.01, 0.03, 0.07):
        def integrand(y, x, s=s):
            mu = np.sqrt(max(1 - x * x - y * y, 0.0))
            local = 0.5 * np.exp(-((np.pi * zeta * s * mu) ** 2)) + 0.5 * np.exp(-((np.pi * zeta * s) ** 2) * (1 - mu**2))
            return ld.intensity(mu) * np.cos(2 * np.pi * s * vsini * x) * local
        num = integrate.dblquad(integrand, -1, 1, lambda x: -np.sqrt(1 - x * x), lambda x: np.sqrt(1 - x * x), epsabs=1e-10)[0]
        assert K.rotation_rt_transform(np.array([s]), vsini, zeta, ld)[0] == pytest.approx(num / (np.pi * ld.flux_norm()), abs=1e-7)


def _reference_panels(smax, vsini, zmax):
    """Panels of the fixed 16-point reference rule: 1.5 x the count its docstring gives as converged."""
    return int(1.5 * (3 + 2 * np.pi * smax * vsini / 8 + np.pi * zmax * smax / 2)) + 2


# (vsini, zeta, zeta_T, radial fraction, law, max sigma, frequencies, path): every regime of the fast
# transform. 'chebyshev': computed at Chebyshev points and interpolated; 'direct': a rule at every
# frequency. Inside: whole-disc Gauss rules in rho, truncated intervals for narrow Gaussians
# (pi zeta sigma > 10) and composite rules in t for large Bessel phases (2 pi sigma vsini > ~900).
JOINT_CASES = [
    (20.0, 4.0, None, 0.5, linear(0.6), 0.44, 283, "chebyshev"),  # the model benchmark (1 km/s pixels)
    (100.0, 5.0, 2.0, 0.3, quadratic(0.4, 0.25), 0.5, 400, "chebyshev"),
    (2.0, 30.0, 12.0, 0.5, linear(1.0), 1.0, 400, "chebyshev"),  # both Gaussians narrow at high frequency
    (0.0, 20.0, 50.0, 0.0, linear(0.0), 1.0, 400, "chebyshev"),  # no rotation, tangential only
    (300.0, 3.0, None, 1.0, quadratic(0.3, 0.3), 1.0, 40, "direct"),  # composite rules in t
    (500.0, 30.0, 10.0, 0.7, linear(0.6), 1.0, 40, "direct"),  # Nyquist of 0.5 km/s pixels
    (50.0, 10.0, None, 0.5, quadratic(0.0, 1.0), 0.1, 7, "direct"),
]


@pytest.mark.parametrize("vsini,zeta,zeta_t,radial,ld,smax,n,path", JOINT_CASES)
def test_joint_transform_matches_the_reference_quadrature(vsini, zeta, zeta_t, radial, ld, smax, n, path):
    """The fast joint transform equals the fixed composite 16-point Gauss-Legendre rule (``n_panels``,
    the reference: itself checked against a brute-force disc integral above) to 1e-11 absolute
    (observed < 1e-13), in each numerical regime; it is even in sigma and 1 at sigma = 0."""
    s = np.linspace(0.0, smax, n)
    zt = zeta if zeta_t is None else zeta_t
    panels = _reference_panels(smax, vsini, max(zeta, zt))
    reference = K.rotation_rt_transform(s, vsini, zeta, ld, radial, zeta_t, n_panels=panels)
    _jointrt._cached_barycentric_matrix.cache_clear()
    fast = K.rotation_rt_transform(s, vsini, zeta, ld, radial, zeta_t)
    assert _jointrt._cached_barycentric_matrix.cache_info().currsize == (path == "chebyshev")
    np.testing.assert_allclose(fast, reference, rtol=0, atol=1e-11)
    assert fast[0] == pytest.approx(1.0, abs=1e-14)
    flipped = K.rotation_rt_transform(-s[::-1], vsini, zeta, ld, radial, zeta_t)
    np.testing.assert_allclose(flipped, fast[::-1], rtol=0, atol=1e-14)


def test_joint_transform_refines_an_underestimated_chebyshev_degree(monkeypatch):
    """When the a-priori Chebyshev degree is too low, the degree is doubled until the last coefficients
    fall below 1e-13 (or the frequencies are computed one by one): the result is unchanged."""
    s = np.linspace(0.0, 0.44, 283)
    expected = K.rotation_rt_transform(s, 20.0, 4.0, 0.6)
    monkeypatch.setattr(_jointrt, "_chebyshev_degree", lambda *args: 8)
    np.testing.assert_allclose(K.rotation_rt_transform(s, 20.0, 4.0, 0.6), expected, rtol=0, atol=1e-12)


@pytest.mark.parametrize("ld", LAW_EXAMPLES, ids=lambda ld: ld.label)
def test_flux_gauss_rule_integrates_polynomials_exactly(ld):
    """The n-node Gauss rule for the flux weight I(sqrt(1 - rho)) on [0, 1] integrates rho^k exactly for
    k <= 2n - 1 (Gauss quadrature; Golub & Welsch 1969, Math. Comp. 23, 221, from memory). With
    mu^2 = 1 - rho and I = c0 + c1 mu + c2 mu^2 the moments are c0/(k+1) + c1 B(3/2, k+1) + c2/((k+1)(k+2)),
    B the beta function (Abramowitz & Stegun 1964, eq. 6.2.1; scipy.special.beta)."""
    a, b = ld.quadratic_coefficients
    c0, c1, c2 = 1 - a - b, a + 2 * b, -b
    def moment(k):
        return c0 / (k + 1) + c1 * special.beta(1.5, k + 1) + c2 / ((k + 1) * (k + 2))
    for n in (3, 40, 200):
        _, rho, _, w = _jointrt._flux_rule(n, ld)
        assert np.all(w > 0) and np.all((rho > 0) & (rho < 1))
        for k in (0, 1, n, 2 * n - 1):
            assert w @ rho**k == pytest.approx(moment(k) / moment(0), rel=1e-11)


def test_joint_transform_rejects_non_finite_frequencies():
    with pytest.raises(InputError, match="sigma must be finite"):
        K.rotation_rt_transform(np.array([0.1, np.nan]), 20.0, 4.0)


@pytest.mark.parametrize("vsini,zeta,bound", [(50.0, 5.0, 0.02), (20.0, 5.0, 0.025), (20.0, 10.0, 0.045), (5.0, 5.0, 0.13)])
def test_product_approximation_error_is_documented(vsini, zeta, bound):
    """The product of separate rotation and RT kernels differs from the joint disc integral by the amounts
    documented in docs/methods.md (max |difference| / peak): about 2 % for zeta <= vsini/4, growing to
    ~12 % when zeta ~ vsini. The bound is asserted both ways so the documentation cannot drift."""
    v = np.arange(-(vsini + 8 * zeta), vsini + 8 * zeta, 0.1)
    joint = Broadening(vsini=vsini, macroturbulence=zeta, rt_mode="joint").profile(v)
    prod = Broadening(vsini=vsini, macroturbulence=zeta, rt_mode="product").profile(v)
    err = np.abs(joint - prod).max() / joint.max()
    assert bound * 0.5 < err < bound


settings_fast = settings(max_examples=25, deadline=None)


@settings_fast
@given(
    vsini=st.floats(0.0, 500.0),
    eps=st.floats(0.0, 1.0),
    b=st.floats(0.5, 5.0),  # every real line has a thermal width above ~0.5 km/s
    zeta=st.floats(0.0, 15.0),
    resolution=st.sampled_from([None, 20000.0, 60000.0, 110000.0]),
    gaussian_macro=st.booleans(),
)
def test_composed_kernel_unit_area_and_symmetric(vsini, eps, b, zeta, resolution, gaussian_macro):
    """Every composed kernel integrates to 1 (to 1e-10) and is symmetric."""
    br = Broadening(vsini=vsini, limb_darkening=eps, intrinsic_width=b, macroturbulence=zeta,
                    macro_kind="gaussian" if gaussian_macro else "rt", resolution=resolution)
    dv = 0.5
    v, k = composed_kernel(br, dv, pixel_width=dv)
    # With an instrument the kernel is band-limited to machine precision; without one (an idealised
    # case) the sum over aliases beyond Nyquist is truncated (vsini.model._alias_terms) at ~1e-9.
    assert k.sum() * dv == pytest.approx(1.0, abs=1e-10 if resolution else 1e-8)
    np.testing.assert_allclose(k, k[::-1], atol=1e-12 * max(1.0, k.max()))


def test_kernel_narrower_than_a_pixel_has_no_sampling_error():
    """Pixel means of a rotation kernel far narrower than a pixel equal the exact bin integrals (closed-form
    CDF), and vsini = 0 puts the whole line into one pixel (the delta limit)."""
    dv = 2.0
    v = dv * np.arange(-5, 6)
    for vsini in (0.0, 0.3, 1.5):
        prof = Broadening(vsini=vsini).profile(v, pixel_width=dv)
        assert prof.sum() * dv == pytest.approx(1.0, abs=1e-14)
        if vsini < dv / 2:
            assert prof[5] * dv == pytest.approx(1.0, abs=1e-14)
    # with an instrument much narrower than a pixel, the Fourier route agrees with exact bin integrals
    ft = Broadening(vsini=1.5, resolution=3e6).profile(v, pixel_width=dv)
    exact = Broadening(vsini=1.5).profile(v, pixel_width=dv)
    np.testing.assert_allclose(ft, exact, atol=5e-4)  # the 0.1 km/s instrument itself spreads ~1e-3


def test_vsini_to_zero_tends_to_the_unbroadened_profile():
    v = np.arange(-20, 20.001, 0.1)
    base = Broadening(intrinsic_width=2.0, resolution=60000).profile(v)
    small = Broadening(vsini=1e-4, intrinsic_width=2.0, resolution=60000).profile(v)
    np.testing.assert_allclose(small, base, atol=1e-9)


def test_synthesize_places_lines_by_phase_and_keeps_equivalent_width():
    """A line at a sub-pixel offset keeps its equivalent width and its centroid (first moment)."""
    br = Broadening(vsini=25.0, intrinsic_width=1.5, resolution=50000)
    dv, n = 0.8, 600
    offsets = np.array([123.37, 301.9, 385.55])
    ew = np.array([2.0, 1.0, 3.0])
    d = synthesize(br, dv, n, offsets, ew, line_window=np.array([0, 1, 1]), n_windows=2)
    v = dv * np.arange(n)
    assert d[0].sum() * dv == pytest.approx(2.0, rel=1e-9)
    assert (d[0] * v).sum() / d[0].sum() == pytest.approx(123.37, abs=1e-6)
    assert d[1].sum() * dv == pytest.approx(4.0, rel=1e-9)
    # a line left of the window still contributes its wing, nothing wraps round
    d2 = synthesize(br, dv, 100, np.array([-20.0]), np.array([1.0]))
    assert d2[0, -30:].max() < 1e-9 and d2[0, 0] > 1e-3


def test_equivalent_width_from_depth():
    """Gaussian line d exp(-(v/b)^2) has W = d sqrt(pi) b (closed form)."""
    assert equivalent_width_from_depth(0.5, 2.0) == pytest.approx(0.5 * np.sqrt(np.pi) * 2.0)
    w = equivalent_width_from_depth(0.5, 2.0, damping=0.2)
    assert w * K.voigt_profile(np.array([0.0]), 2.0, 0.2)[0] == pytest.approx(0.5)


def test_tabulated_lsf_transform_matches_gaussian():
    """A finely tabulated Gaussian LSF has the Gaussian's closed-form transform; the example file loads."""
    b = K.instrument_width(50000)
    v = np.linspace(-8 * b, 8 * b, 1601)
    lsf = TabulatedLSF(v, K.gaussian_profile(v, b))
    s = np.linspace(0, 0.5, 51)
    # linear interpolation between table points multiplies the transform by ~1 - (pi sigma h)^2/3 (h the
    # table step): 2e-5 at sigma = 0.2 s/km here
    np.testing.assert_allclose(lsf.transform(s), K.gaussian_transform(s, b), atol=5e-5)
    vv = np.arange(-30, 30.01, 0.25)
    np.testing.assert_allclose(Broadening(lsf=lsf).profile(vv), Broadening(resolution=50000).profile(vv), atol=1e-5)


def test_example_lsf_ships_with_the_package():
    from vsini.datafiles import data_path
    from vsini.model import load_lsf

    lsf = load_lsf(data_path("lsf_example.ecsv"))
    assert lsf.transform(np.array([0.0]))[0] == pytest.approx(1.0)


@pytest.mark.parametrize(
    "kwargs,match",
    [
        ({"vsini": -1.0}, "vsini must be a finite number >= 0"),
        ({"vsini": np.nan}, "vsini must be a finite number"),
        ({"vsini": 5000.0}, "beyond any star"),
        ({"macro_kind": "foo"}, "macro_kind must be one of"),
        ({"rt_mode": "foo"}, "rt_mode must be one of"),
        ({"damping": 0.5}, "needs a positive intrinsic_width"),
        ({"resolution": -5.0}, "resolving power must be a positive number"),
    ],
)
def test_broadening_rejects_bad_values(kwargs, match):
    with pytest.raises(InputError, match=match):
        Broadening(**kwargs)


@pytest.mark.parametrize(
    "value,match",
    [("abc", "cannot read 'abc'"), ((0.1, 0.2, 0.3), "cannot read"), (2.5, "negative intensity")],
)
def test_limb_darkening_rejects_bad_values(value, match):
    with pytest.raises(InputError, match=match):
        as_limb_darkening(value)


def test_limb_darkening_parsing():
    assert as_limb_darkening("0.4,0.25") == quadratic(0.4, 0.25)
    assert as_limb_darkening(0.6) == linear(0.6)
    assert as_limb_darkening(("quadratic", 0.1, 0.2)) == quadratic(0.1, 0.2)
    with pytest.raises(InputError, match="unknown law 'cubic'"):
        LimbDarkening("cubic", (0.1,))
    with pytest.raises(InputError, match="takes 2 coefficient"):
        LimbDarkening("quadratic", (0.1,))


def test_lsf_validation():
    with pytest.raises(InputError, match="strictly increasing"):
        TabulatedLSF(np.array([0.0, 0.0, 1.0]), np.ones(3))
    with pytest.raises(InputError, match="negative response"):
        TabulatedLSF(np.array([0.0, 1.0, 2.0]), np.array([1.0, -1.0, 1.0]))
    with pytest.raises(InputError, match="zero area"):
        TabulatedLSF(np.array([0.0, 1.0, 2.0]), np.zeros(3))
    with pytest.raises(InputError, match="rotation_profile: vsini must be positive"):
        K.rotation_profile(np.zeros(3), 0.0)
