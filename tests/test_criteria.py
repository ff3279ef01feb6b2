"""Tests of dynamics.criteria: the D_SH, D_D and D_H orbit-similarity criteria."""

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from dynamics.criteria import OrbitShape, d_d, d_h, d_sh
from dynamics.errors import InvalidOrbit

#: Tolerance on a D value checked against a hand calculation (dimensionless). The hand values
#: below are rounded to 7 significant digits; 1e-6 is a few units of that last digit.
HAND_TOL = 1e-6
#: Tolerance of exact identities (dimensionless): a few hundred double-precision roundings of
#: trigonometric terms of order 1; the sqrt near D = 0 turns 1e-32 in D^2 into 1e-16 in D.
EXACT_TOL = 1e-12
#: Tolerance of symmetry and rotation identities over random orbits (dimensionless). Rotating
#: nodes by up to 720 deg rounds them at ~1e-13 rad; near oppositely oriented planes
#: (I21 -> 180 deg, excluded below to 1 - cos I21 > 1e-9) the Pi21 term amplifies that by up to
#: 1/cos(I21/2) ~ 5e4, so ~1e-8 at worst. Measured worst case over 4e5 random pairs: 2e-12.
IDENTITY_TOL = 1e-8

# Worked example (hand calculation, written out here step by step; every intermediate value was
# evaluated with a calculator to 7+ digits). Angles in degrees.
#   orbit 1: q1 = 0.9 au, e1 = 0.8, i1 = 20, Omega1 = 100, omega1 = 150
#   orbit 2: q2 = 1.0 au, e2 = 0.7, i2 = 30, Omega2 = 110, omega2 = 160
ORBIT_1 = OrbitShape(q_au=0.9, e=0.8, incl_deg=20.0, node_deg=100.0, peri_deg=150.0)
ORBIT_2 = OrbitShape(q_au=1.0, e=0.7, incl_deg=30.0, node_deg=110.0, peri_deg=160.0)
#
# Southworth & Hawkins (1963) terms:
#   (e2 - e1)^2 = (-0.1)^2 = 0.01
#   (q2 - q1)^2 = (0.1)^2 = 0.01
#   I21 term: (2 sin((i2 - i1)/2))^2 = (2 sin 5)^2 = (0.1743115)^2 = 0.03038449
#             sin i1 sin i2 (2 sin((Omega2 - Omega1)/2))^2 = 0.3420201 * 0.5 * 0.03038449
#                                                            = 0.005196054
#             (2 sin(I21/2))^2 = 0.03038449 + 0.005196054 = 0.03558055
#             => I21 = 2 arcsin(sqrt(0.03558055)/2) = 10.82368 deg, cos(I21/2) = 0.9955425
#   Pi21: arcsin argument = cos((i1 + i2)/2) sin((Omega2 - Omega1)/2) / cos(I21/2)
#                         = cos 25 * sin 5 / 0.9955425 = 0.9063078 * 0.08715574 / 0.9955425
#                         = 0.07934360 -> arcsin = 4.550837 deg
#         Pi21 = (omega2 - omega1) + 2 * 4.550837 = 10 + 9.101674 = 19.10167 deg
#         (2 sin(Pi21/2))^2 = 0.1101213; ((e1 + e2)/2)^2 = 0.75^2 = 0.5625
#         -> 0.5625 * 0.1101213 = 0.06194323
#   D_SH^2 = 0.01 + 0.01 + 0.03558055 + 0.06194323 = 0.1175238;  D_SH = 0.3428174
HAND_D_SH = 0.3428174
#
# Jopek (1993) D_H: the same, with (q2 - q1)^2 replaced by ((q2 - q1)/(q2 + q1))^2
#   = (0.1/1.9)^2 = 0.05263158^2 = 0.002770083
#   D_H^2 = 0.01 + 0.002770083 + 0.03558055 + 0.06194323 = 0.1102939;  D_H = 0.3321052
HAND_D_H = 0.3321052
#
# Drummond (1981) D_D:
#   ((e2 - e1)/(e2 + e1))^2 = (-0.1/1.5)^2 = 0.004444444
#   ((q2 - q1)/(q2 + q1))^2 = 0.002770083
#   cos I21 = cos 20 cos 30 + sin 20 sin 30 cos 10 = 0.9822097 -> I21 = 10.82368 deg
#   (I21/180)^2 = 0.06013155^2 = 0.003615803
#   perihelion points: beta = arcsin(sin i sin omega), lambda = Omega + arctan(cos i tan omega)
#     (+180 deg since cos omega < 0 for both):
#     orbit 1: beta1 = arcsin(0.3420201 * 0.5) = 9.846552 deg;
#              lambda1 = 100 + arctan(0.9396926 * -0.5773503) + 180
#                      = 100 - 28.48124 + 180 = 251.5188 deg
#     orbit 2: beta2 = arcsin(0.5 * 0.3420201) = 9.846552 deg;
#              lambda2 = 110 + arctan(0.8660254 * -0.3639702) + 180
#                      = 110 - 17.49524 + 180 = 272.5048 deg
#   cos theta21 = sin b1 sin b2 + cos b1 cos b2 cos(l2 - l1)
#               = 0.02924444 + 0.9707556 * cos(20.98600) = 0.02924444 + 0.9707556 * 0.9336680
#               = 0.9356078 -> theta21 = 20.67343 deg
#   ((e1 + e2)/2)^2 (theta21/180)^2 = 0.5625 * 0.1148524^2 = 0.5625 * 0.01319108 = 0.007419980
#   D_D^2 = 0.004444444 + 0.002770083 + 0.003615803 + 0.007419980 = 0.01825031
#   D_D = 0.1350937
HAND_D_D = 0.1350937


@pytest.mark.reference
def test_d_sh_hand_worked_example():
    assert float(d_sh(ORBIT_1, ORBIT_2)) == pytest.approx(HAND_D_SH, abs=HAND_TOL)


@pytest.mark.reference
def test_d_h_hand_worked_example():
    assert float(d_h(ORBIT_1, ORBIT_2)) == pytest.approx(HAND_D_H, abs=HAND_TOL)


@pytest.mark.reference
def test_d_d_hand_worked_example():
    assert float(d_d(ORBIT_1, ORBIT_2)) == pytest.approx(HAND_D_D, abs=HAND_TOL)


@pytest.mark.reference
def test_single_element_differences_by_hand():
    # Hand calculation: when only q differs, D_SH = |q2 - q1| (au taken as unit) and
    # D_D = D_H = |q2 - q1| / (q2 + q1); here 0.2 and 0.2 / 2.0 = 0.1.
    a = OrbitShape(0.9, 0.9, 160.0, 235.0, 170.0)
    b = OrbitShape(1.1, 0.9, 160.0, 235.0, 170.0)
    assert float(d_sh(a, b)) == pytest.approx(0.2, abs=EXACT_TOL)
    assert float(d_h(a, b)) == pytest.approx(0.1, abs=EXACT_TOL)
    assert float(d_d(a, b)) == pytest.approx(0.1, abs=EXACT_TOL)
    # Hand calculation: when only omega differs by 60 deg, both planes coincide (I21 = 0),
    # Pi21 = 60 deg, so D_SH = D_H = ((e1+e2)/2) * 2 sin(30 deg) = e = 0.9, and the perihelia are
    # 60 deg apart in the common plane: D_D = e * 60/180 = 0.3.
    c = OrbitShape(0.9, 0.9, 160.0, 235.0, 230.0)
    assert float(d_sh(a, c)) == pytest.approx(0.9, abs=EXACT_TOL)
    assert float(d_h(a, c)) == pytest.approx(0.9, abs=EXACT_TOL)
    assert float(d_d(a, c)) == pytest.approx(0.3, abs=EXACT_TOL)


@pytest.mark.invariant
def test_node_difference_across_zero_uses_sign_convention():
    # Rotating both nodes of the worked example by 255 deg puts them at 355 and 5 deg
    # (|Omega2 - Omega1| = 350 > 180): the sign convention of the Pi21 arcsin term must give the
    # same D as the unrotated pair (Southworth & Hawkins 1963; Jopek 1993).
    rot1 = OrbitShape(0.9, 0.8, 20.0, 355.0, 150.0)
    rot2 = OrbitShape(1.0, 0.7, 30.0, 5.0, 160.0)
    for crit, hand in ((d_sh, HAND_D_SH), (d_h, HAND_D_H), (d_d, HAND_D_D)):
        assert float(crit(rot1, rot2)) == pytest.approx(hand, abs=HAND_TOL)
        assert float(crit(rot2, rot1)) == pytest.approx(hand, abs=HAND_TOL)


@pytest.mark.invariant
def test_opposite_planes_are_finite_and_symmetric():
    # Hand calculation for the degenerate case (documented convention of dynamics.criteria): two
    # polar orbits with nodes 180 deg apart lie in one plane, moving in opposite senses, so
    # I21 = 180 deg: (2 sin(I21/2))^2 = 4; there is no mutual node and the arcsin term of Pi21 is
    # taken as 0, so Pi21 = omega2 - omega1 = 0. With equal q and e: D_SH^2 = 4, D_SH = 2.
    a = OrbitShape(1.0, 0.9, 90.0, 0.0, 170.0)
    b = OrbitShape(1.0, 0.9, 90.0, 180.0, 170.0)
    assert float(d_sh(a, b)) == pytest.approx(2.0, abs=EXACT_TOL)
    assert float(d_sh(b, a)) == pytest.approx(2.0, abs=EXACT_TOL)
    assert float(d_h(a, b)) == pytest.approx(float(d_h(b, a)), abs=EXACT_TOL)


_orbits = st.builds(
    OrbitShape,
    q_au=st.floats(0.05, 5.0),
    e=st.floats(0.0, 1.2),
    incl_deg=st.floats(0.0, 180.0),
    node_deg=st.floats(0.0, 360.0, exclude_max=True),
    peri_deg=st.floats(0.0, 360.0, exclude_max=True),
)


@pytest.mark.invariant
@settings(max_examples=200, deadline=None)
@given(o1=_orbits, o2=_orbits, rotation_deg=st.floats(-720.0, 720.0))
def test_symmetry_identity_and_node_rotation(o1, o2, rotation_deg):
    # Exclude the one genuine discontinuity of D_SH and D_H: coplanar orbits moving in opposite
    # senses (I21 = 180 deg) have no mutual node, and Pi21 is undefined there.
    i1, i2, dn = (math.radians(x) for x in (o1.incl_deg, o2.incl_deg, o2.node_deg - o1.node_deg))
    cos_i21 = math.cos(i1) * math.cos(i2) + math.sin(i1) * math.sin(i2) * math.cos(dn)
    assume(cos_i21 > -1.0 + 1e-9)
    for crit in (d_sh, d_d, d_h):
        d12 = float(crit(o1, o2))
        assert d12 >= 0.0
        assert float(crit(o1, o1)) == pytest.approx(0.0, abs=EXACT_TOL)
        assert float(crit(o2, o1)) == pytest.approx(d12, abs=IDENTITY_TOL)
        # A common rotation of both nodes (about the ecliptic pole) changes no relative geometry.
        r1 = OrbitShape(o1.q_au, o1.e, o1.incl_deg, o1.node_deg + rotation_deg, o1.peri_deg)
        r2 = OrbitShape(o2.q_au, o2.e, o2.incl_deg, o2.node_deg + rotation_deg, o2.peri_deg)
        assert float(crit(r1, r2)) == pytest.approx(d12, abs=IDENTITY_TOL)


@pytest.mark.invariant
@settings(max_examples=100, deadline=None)
@given(o1=_orbits, o2=_orbits)
def test_d_sh_and_d_h_differ_only_in_q_term(o1, o2):
    # Jopek (1993) built D_H from D_SH by replacing (q2 - q1)^2 with ((q2 - q1)/(q2 + q1))^2.
    dq = o2.q_au - o1.q_au
    expected = dq**2 - (dq / (o1.q_au + o2.q_au)) ** 2
    got = float(d_sh(o1, o2)) ** 2 - float(d_h(o1, o2)) ** 2
    # D^2 is up to about 30 here, so allow 100x the exact-identity tolerance.
    assert got == pytest.approx(expected, abs=EXACT_TOL * 100)


@pytest.mark.invariant
def test_broadcasting_one_against_many_matches_loop():
    many = OrbitShape(
        q_au=np.array([0.9, 1.0, 0.14]),
        e=np.array([0.8, 0.7, 0.89]),
        incl_deg=np.array([20.0, 30.0, 22.3]),
        node_deg=np.array([100.0, 110.0, 265.1]),
        peri_deg=np.array([150.0, 160.0, 322.3]),
    )
    for crit in (d_sh, d_d, d_h):
        vec = crit(ORBIT_1, many)
        assert vec.shape == (3,)
        for k in range(3):
            one = OrbitShape(*(float(getattr(many, f)[k]) for f in OrbitShape.__dataclass_fields__))
            assert vec[k] == pytest.approx(float(crit(ORBIT_1, one)), abs=EXACT_TOL)
    # Mappings work as orbits too.
    as_dict = {f: getattr(ORBIT_2, f) for f in OrbitShape.__dataclass_fields__}
    assert float(d_sh(ORBIT_1, as_dict)) == pytest.approx(HAND_D_SH, abs=HAND_TOL)


@pytest.mark.invariant
def test_impossible_orbits_are_rejected():
    with pytest.raises(InvalidOrbit) as info:
        d_sh(OrbitShape(0.0, 0.5, 10.0, 0.0, 0.0), ORBIT_2)
    assert info.value.field == "orbit1.q_au"
    with pytest.raises(InvalidOrbit):
        d_d(ORBIT_1, OrbitShape(1.0, -0.1, 10.0, 0.0, 0.0))
    with pytest.raises(InvalidOrbit):
        d_h(ORBIT_1, OrbitShape(1.0, 0.5, 190.0, 0.0, 0.0))
    with pytest.raises(InvalidOrbit):
        d_sh(ORBIT_1, {"q_au": 1.0})
    assert math.isfinite(float(d_sh(ORBIT_1, ORBIT_2)))
