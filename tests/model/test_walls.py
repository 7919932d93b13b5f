"""Wall model: London's random-incidence absorption of a real impedance, and its inverse."""

import numpy as np
import pytest
from scipy.integrate import quad

from roommodes.model.walls import (
    ALPHA_MAX,
    admittance_from_absorption,
    impedance_from_absorption,
    normal_incidence_absorption,
    random_incidence_absorption,
    reflection_factor,
)


@pytest.mark.parametrize("zeta", [1.2, 2.0, 5.0, 20.0, 80.0, 700.0])
def test_closed_form_matches_paris_integral(zeta):
    # Reference: the definition (Paris formula) alpha_st = int_0^{pi/2} alpha(t) sin(2t) dt with
    # alpha(t) = 1 - |R(t)|^2, R = (zeta cos t - 1)/(zeta cos t + 1) (Kuttruff, Room Acoustics,
    # 5th ed., 2009, sec. 2.5), integrated numerically with scipy.integrate.quad.
    def integrand(t):
        r = (zeta * np.cos(t) - 1) / (zeta * np.cos(t) + 1)
        return (1 - r**2) * np.sin(2 * t)

    ref, _ = quad(integrand, 0, np.pi / 2, epsabs=1e-13)
    assert random_incidence_absorption(zeta) == pytest.approx(ref, rel=1e-9)


def test_maximum_of_london_formula():
    # The maximum random-incidence absorption of a real impedance is 0.951 at zeta ~ 1.567
    # (London 1950, JASA 22:263; value recalled from memory, checked here by brute force).
    z = np.linspace(1.0, 3.0, 200001)
    a = random_incidence_absorption(z)
    assert ALPHA_MAX == pytest.approx(a.max(), abs=1e-9)
    assert z[np.argmax(a)] == pytest.approx(1.567, abs=2e-3)
    assert ALPHA_MAX == pytest.approx(0.951, abs=1e-3)


@pytest.mark.parametrize("alpha", [1e-4, 0.01, 0.1, 0.3, 0.45, 0.8, 0.95])
def test_inversion_round_trip(alpha):
    z = impedance_from_absorption(alpha)
    assert z >= 1.566
    assert random_incidence_absorption(z) == pytest.approx(alpha, rel=1e-9)


def test_small_absorption_shortcut_and_its_error():
    # For nearly rigid walls alpha -> 8 beta (Kuttruff 2009, sec. 2.5); at alpha = 0.45 the
    # shortcut gives an admittance about a third too small (CHECKS.md, computed).
    assert admittance_from_absorption(1e-4) == pytest.approx(1e-4 / 8, rel=2e-3)
    ratio = (0.45 / 8) / admittance_from_absorption(0.45)
    assert 0.60 < ratio < 0.70


def test_normal_incidence_is_about_half_of_diffuse():
    # CHECKS.md (our own study, computed): a real-impedance wall with normal-incidence
    # absorption 0.1 has diffuse-field absorption 0.175; 0.3 -> 0.45.
    for a_n, a_d in ((0.1, 0.175), (0.3, 0.45)):
        z = impedance_from_absorption(a_d)
        assert normal_incidence_absorption(z) == pytest.approx(a_n, abs=0.006)


def test_rigid_and_reflection_factor():
    assert impedance_from_absorption(0.0) == np.inf
    assert admittance_from_absorption(0.0) == 0.0
    assert reflection_factor(np.inf, 0.3) == 1.0
    # zeta = 1: matched at normal incidence (R = 0), grazing incidence fully reflected (R = -1)
    assert reflection_factor(1.0, 1.0) == pytest.approx(0.0)
    assert reflection_factor(1.0, 0.0) == pytest.approx(-1.0)
    # energy balance: 1 - R^2 at normal incidence equals the normal-incidence absorption
    z = 7.0
    assert 1 - reflection_factor(z, 1.0) ** 2 == pytest.approx(normal_incidence_absorption(z))
