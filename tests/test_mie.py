"""Single-sphere Mie results against published tables, limits and an independent code."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from dustrt.mie import sphere_amplitudes, sphere_efficiencies

# Wiscombe (1979), NCAR/TN-140+STR, MIEV0 test answers (CHECK_VALUES.md).  The report
# writes absorbing indices with Im m <= 0; dustrt uses m = n + ik, k >= 0, so conjugate.
# Columns: case, x, m (Wiscombe), Qext, Qsca, g.  Tolerances follow the printed digits.
WISCOMBE_1979 = [
    (7, 10.0, 0.75, 2.232265, 2.232265, 0.896473),
    (9, 1.0, 1.33 - 1e-5j, 9.395198e-2, 9.39233e-2, 0.184517),
    (10, 100.0, 1.33 - 1e-5j, 2.101321, 2.096594, 0.868959),
    (12, 0.055, 1.5 - 1j, 0.101491, 1.131687e-5, 4.91e-4),
    (14, 1.0, 1.5 - 1j, 2.336321, 0.6634538, 0.192136),
    (15, 100.0, 1.5 - 1j, 2.097502, 1.283697, 0.850252),
    (17, 1.0, 10 - 10j, 2.532993, 2.049405, -0.110664),
    (18, 100.0, 10 - 10j, 2.071124, 1.836785, 0.556215),
]


@pytest.mark.parametrize("case,x,m,qext,qsca,g", WISCOMBE_1979)
def test_wiscombe_1979_efficiencies(case, x, m, qext, qsca, g):
    e = sphere_efficiencies(x, np.conj(m))
    assert e.extinction == pytest.approx(qext, rel=1e-6)
    assert e.scattering == pytest.approx(qsca, rel=1e-6)
    # g printed to 6 decimals (3 significant figures for case 12)
    assert e.asymmetry_parameter == pytest.approx(g, abs=1e-6 if case != 12 else 1e-5)


def test_wiscombe_1979_case14_amplitudes():
    # Wiscombe (1979) test case 14, x = 1, m = 1.5 - 1i; MIEV0 amplitudes are the complex
    # conjugates of Bohren & Huffman's, which dustrt returns.
    s1_ref = np.array([0.5840802 + 0.1905153j, 0.5657020 + 0.1871997j, 0.5175251 + 0.1784426j,
                       0.4563396 + 0.1671665j, 0.4002117 + 0.1566427j, 0.3621572 + 0.1493910j,
                       0.3488438 + 0.1468286j])
    s2_ref = np.array([0.5840802 + 0.1905153j, 0.5001610 + 0.1456112j, 0.2879639 + 0.0410540j,
                       0.0362285 - 0.0618265j, -0.1748750 - 0.1229586j, -0.3056823 - 0.1438460j,
                       -0.3488438 - 0.1468286j])
    s1, s2 = sphere_amplitudes(1.0, 1.5 + 1j, np.arange(0, 181, 30))
    np.testing.assert_allclose(np.conj(s1), s1_ref, atol=2e-7)
    np.testing.assert_allclose(np.conj(s2), s2_ref, atol=2e-7)


def test_bohren_huffman_appendix_a_example():
    # Bohren & Huffman (1983), Appendix A sample output: m = 1.55, a = 0.525 µm,
    # λ = 0.6328 µm (exact x, CHECK_VALUES.md): Qsca = Qext = 3.10543, Qback = 2.92534,
    # S11(90°)/S11(0°) = 0.124601e-1, -S12/S11 (90°) = 0.230462.
    x = 2 * np.pi * 0.525 / 0.6328
    e = sphere_efficiencies(x, 1.55)
    assert e.extinction == pytest.approx(3.10543, rel=2e-6)
    assert e.scattering == pytest.approx(3.10543, rel=2e-6)
    s1, s2 = sphere_amplitudes(x, 1.55, [0.0, 90.0, 180.0])
    s11 = 0.5 * (abs(s1) ** 2 + abs(s2) ** 2)
    s12 = 0.5 * (abs(s2) ** 2 - abs(s1) ** 2)
    assert s11[1] / s11[0] == pytest.approx(0.124601e-1, rel=1e-5)
    assert -s12[1] / s11[1] == pytest.approx(0.230462, rel=1e-5)
    assert 4 * s11[2] / x**2 == pytest.approx(2.92534, rel=2e-6)  # Qback = 4|S(180)|²/x²


@pytest.mark.parametrize("m", [1.33 + 0j, 1.5 + 0.1j, 1.7 + 0.5j, 2.0 + 1e-3j])
@pytest.mark.parametrize("x", [1e-4, 1e-3])
def test_rayleigh_limit(x, m):
    # Bohren & Huffman (1983), ch. 5: Qsca = 8/3 x^4 |K|^2, Qabs = 4 x Im K, K = (m²-1)/(m²+2);
    # relative corrections are O(x²) (tolerance 10 x², CHECK_VALUES.md).
    K = (m**2 - 1) / (m**2 + 2)
    e = sphere_efficiencies(x, m)
    assert e.scattering == pytest.approx(8 / 3 * x**4 * abs(K) ** 2, rel=10 * x**2)
    if m.imag > 0:
        assert e.absorption == pytest.approx(4 * x * K.imag, rel=10 * x**2)


def test_large_size_limit_extinction_paradox():
    # van de Hulst (1957): Qext -> 2; |Qext(1e4)-2| < 6e-3, |Qext(1e5)-2| < 1.5e-3 (CHECK_VALUES.md)
    e = sphere_efficiencies(np.array([1e4, 1e5]), 1.5 + 0.01j)
    assert abs(e.extinction[0] - 2) < 6e-3
    assert abs(e.extinction[1] - 2) < 1.5e-3


@pytest.mark.parametrize("x,m", [(0.3, 1.6 + 0.01j), (5.0, 1.5 + 0.1j), (40.0, 1.33 + 0j), (3.0, 2.0 + 0.5j)])
def test_amplitude_identities(x, m):
    # Bohren & Huffman (1983) §4.4: optical theorem Qext = 4 Re S(0)/x²; S1(0) = S2(0);
    # S1(180°) = -S2(180°).
    s1, s2 = sphere_amplitudes(x, m, [0.0, 180.0])
    assert s1[0] == pytest.approx(s2[0], rel=1e-12)
    assert s1[1] == pytest.approx(-s2[1], rel=1e-10, abs=1e-14)
    assert 4 * s1[0].real / x**2 == pytest.approx(sphere_efficiencies(x, m).extinction, rel=1e-10)


def test_phase_integral_equals_qsca_and_g():
    # Gauss-Legendre with N+1 nodes integrates (|S1|²+|S2|²)/2 exactly (CHECK_VALUES.md):
    # ∫ (|S1|²+|S2|²)/2 dΩ / (π x²) = Qsca, and the cos-weighted integral gives g·Qsca.
    x, m = 7.3, 1.55 + 0.02j
    mu, w = np.polynomial.legendre.leggauss(64)
    s1, s2 = sphere_amplitudes(x, m, np.rad2deg(np.arccos(mu)))
    i = 0.5 * (abs(s1) ** 2 + abs(s2) ** 2)
    e = sphere_efficiencies(x, m)
    qsca = 2 * np.pi * np.sum(w * i) / (np.pi * x**2)
    assert qsca == pytest.approx(e.scattering, rel=1e-10)
    g = np.sum(w * i * mu) / np.sum(w * i)
    assert g == pytest.approx(e.asymmetry_parameter, rel=1e-9)


def test_against_scattnlay_independent_code():
    # scattnlay 2.4 (PyPI; Peña & Pal 2009, Comput. Phys. Commun. 180, 2348) takes m = n + ik.
    scattnlay = pytest.importorskip("scattnlay").scattnlay
    rng = np.random.default_rng(1)
    for _ in range(12):
        x = float(10 ** rng.uniform(-1.5, 2.0))
        m = complex(rng.uniform(1.3, 2.0), 10 ** rng.uniform(-4, -0.3))
        res = scattnlay(np.array([x]), np.array([m]))
        e = sphere_efficiencies(x, m)
        assert e.extinction == pytest.approx(res[1], rel=1e-7)
        assert e.scattering == pytest.approx(res[2], rel=1e-7)
        assert e.asymmetry_parameter == pytest.approx(res[6], rel=1e-6, abs=1e-9)


def test_against_miepython_reference_library():
    # miepython (PyPI) uses m = n - ik and returns conjugated amplitudes (CHECK_VALUES.md notes).
    miepython = pytest.importorskip("miepython")
    x = np.array([0.05, 0.7, 3.2, 15.0, 60.0])
    m = 1.6 + 0.03j
    qext, qsca, _qback, g = miepython.efficiencies_mx(np.conj(m), x)
    e = sphere_efficiencies(x, m)
    np.testing.assert_allclose(e.extinction, qext, rtol=1e-7)
    np.testing.assert_allclose(e.scattering, qsca, rtol=1e-7)
    np.testing.assert_allclose(e.asymmetry_parameter, g, rtol=1e-6)


@settings(max_examples=40, deadline=None)
@given(n=st.floats(1.3, 2.0), k=st.floats(0.0, 0.5), radius_um=st.floats(0.005, 3.0),
       wavelength_nm=st.floats(200.0, 1000.0))
def test_property_conservation(n, k, radius_um, wavelength_nm):
    x = 2 * np.pi * radius_um / (wavelength_nm * 1e-3)
    e = sphere_efficiencies(x, complex(n, k))
    assert e.scattering > 0
    assert e.absorption >= -1e-12 * e.extinction  # C_ext = C_sca + C_abs with C_abs >= 0
    if k == 0:
        assert e.absorption == pytest.approx(0.0, abs=1e-10 * e.extinction)
    assert -1.0 <= e.asymmetry_parameter <= 1.0


@pytest.mark.parametrize("bad", [1.5 - 0.1j, -1.2 + 0j, complex(np.nan, 0)])
def test_bad_refractive_index_rejected(bad):
    with pytest.raises(ValueError, match="refractive index"):
        sphere_efficiencies(1.0, bad)


def test_bad_size_parameter_rejected():
    with pytest.raises(ValueError, match="size parameter"):
        sphere_efficiencies(0.0, 1.5)
