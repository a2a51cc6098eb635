"""Tuning rules against the docs/METHODS.md tables, python-control and the defining properties."""

import functools
import math

import control
import numpy as np
import pytest
from scipy.optimize import brentq

from rigbench.tuning.point import FrequencyPoint
from rigbench.tuning.rules import (AMIGO_KAPPA_RANGE, ULTIMATE_RULES, IdealPid, ParallelPid,
                                phase_margin_design, propose_from_point,
                                propose_from_ultimate, rule_from_ultimate)

PLANTS = {
    "lag3": ([1.0], [1.0, 3.0, 3.0, 1.0], 0.0),
    "fopdt": ([1.0], [1.0, 1.0], 1.0),
    "sopdt": ([1.0], [1.0, 2.0, 1.0], 0.5),
}


def g(name, w):
    num, den, delay = PLANTS[name]
    return complex(control.tf(num, den)(1j * w)) * np.exp(-1j * w * delay)


@functools.lru_cache(maxsize=None)
def ultimate(name):
    """Exact ultimate point: root of arg G(jω) = −180° (python-control evaluation)."""
    num, den, delay = PLANTS[name]
    sys = control.tf(num, den)

    def phase(w):  # continuous phase: rational part unwrapped plus the delay
        ws = np.linspace(1e-4, w, 400)
        ph = np.unwrap(np.angle(np.array([complex(sys(1j * x)) for x in ws])))
        return ph[-1] - w * delay + np.pi

    w = brentq(phase, 0.1, 5.0)
    return 1 / abs(g(name, w)), w


# docs/METHODS.md §3 check values [calc]: Ku, ωu, Tu and Z-N PID (K, Ti, Td).
TABLE = {
    "lag3": (8.0000, 1.7321, 3.6276, (4.800, 1.8138, 0.4534)),
    "fopdt": (2.2618, 2.0288, 3.0971, (1.3571, 1.5485, 0.3871)),
    "sopdt": (4.6879, 1.9204, 3.2718, (2.8127, 1.6359, 0.4090)),
}


@pytest.mark.parametrize("name", list(PLANTS))
def test_ultimate_points_and_zn_pid_match_methods_table(name):
    ku_t, wu_t, tu_t, zn = TABLE[name]
    ku, wu = ultimate(name)
    assert ku == pytest.approx(ku_t, abs=2e-4)
    assert wu == pytest.approx(wu_t, abs=2e-4)
    assert 2 * math.pi / wu == pytest.approx(tu_t, abs=2e-4)
    # Ziegler & Nichols (1942): PID K = 0.6Ku, Ti = Tu/2, Td = Tu/8, from the table's row
    p = rule_from_ultimate("ziegler-nichols-pid", ku_t, tu_t)
    assert p.applies
    assert (p.ideal.k, p.ideal.ti_s, p.ideal.td_s) == pytest.approx(zn, abs=6e-4)
    assert (p.kp, p.ki, p.kd) == pytest.approx((zn[0], zn[0] / zn[1], zn[0] * zn[2]), rel=1e-3)


def test_rule_constants_on_lag3():
    # Ku = 8, Tu = 3.6276 (docs/METHODS.md §3). Constants: Ziegler & Nichols (1942); Tyreus &
    # Luyben (1992); "some/no overshoot" from later literature [value from memory];
    # AMIGO frequency form, Åström & Hägglund (2006) ch. 7, with κ = 1/(1·8) = 0.125.
    ku, tu = 8.0, 3.6276
    by_rule = {p.rule: p for p in propose_from_ultimate(ku, tu, static_gain=1.0)}
    expect = {
        "ziegler-nichols-p": (4.0, None, 0.0),
        "ziegler-nichols-pi": (3.6, tu / 1.2, 0.0),
        "ziegler-nichols-pid": (4.8, tu / 2, tu / 8),
        "zn-some-overshoot-pid": (8 / 3, tu / 2, tu / 3),
        "zn-no-overshoot-pid": (1.6, tu / 2, tu / 3),
        "tyreus-luyben-pi": (2.5, 2.2 * tu, 0.0),
        "tyreus-luyben-pid": (8 / 2.2, 2.2 * tu, tu / 6.3),
        "amigo-pi": (1.28, tu / 1.5625, 0.0),
        "amigo-pid": ((0.3 - 0.1 * 0.125 ** 4) * 8, 0.6 * tu / 1.25,
                      0.15 * 0.875 * tu / (1 - 0.95 * 0.125)),
    }
    for rule, (k, ti, td) in expect.items():
        p = by_rule[rule]
        assert p.applies, (rule, p.reason)
        assert p.ideal.k == pytest.approx(k, rel=1e-9)
        assert p.ideal.ti_s == (pytest.approx(ti, rel=1e-9) if ti else None)
        assert p.ideal.td_s == pytest.approx(td, rel=1e-9)
        assert p.source
    assert "later" in by_rule["zn-some-overshoot-pid"].source
    assert set(expect) == set(ULTIMATE_RULES)


def test_ideal_parallel_conversion_round_trip():
    # kp = K, ki = K/Ti, kd = K·Td (docs/METHODS.md §1, common practice)
    ideal = IdealPid(2.0, 4.0, 0.5)
    par = ideal.to_parallel()
    assert par == ParallelPid(2.0, 0.5, 1.0)
    assert par.to_ideal() == ideal
    assert IdealPid(3.0).to_parallel() == ParallelPid(3.0, 0.0, 0.0)


def test_amigo_needs_static_gain_and_validity():
    p = rule_from_ultimate("amigo-pid", 8.0, 3.6, static_gain=None)
    assert not p.applies and "static" in p.reason
    lo, hi = AMIGO_KAPPA_RANGE
    p = rule_from_ultimate("amigo-pi", 8.0, 3.6, static_gain=1.0 / (8.0 * lo * 0.5))
    assert not p.applies and "outside validity" in p.reason
    p = rule_from_ultimate("amigo-pi", 8.0, 3.6, static_gain=1.0, plant="integrating")
    assert not p.applies
    assert rule_from_ultimate("ziegler-nichols-pi", 8.0, 3.6, plant="integrating").applies


def test_amigo_td_denominator_consistent_with_step_rule():
    # Consistency check of the Td denominator docs/METHODS.md §2 questions. On first order plus
    # dead time plants e^{-Ls}/(s+1), the AMIGO step-response rule Td = 0.5LT/(0.3L + T)
    # (Åström & Hägglund 2004, J. Process Control 14 [value from memory]) grows with L/T.
    # The frequency rule with (1 - 0.95κ) follows it within 35%; with (1 + 0.95κ) it is
    # off by more than 45% from L/T = 1 on (it falls as L/T grows).
    for lt in (0.2, 0.5, 1.0, 2.0):
        w = brentq(lambda x: np.arctan(x) + lt * x - np.pi, 1e-6, 1e3)
        ku, tu = math.hypot(1, w), 2 * math.pi / w
        kappa = 1 / ku
        td_step = 0.5 * lt / (0.3 * lt + 1)
        p = rule_from_ultimate("amigo-pid", ku, tu, static_gain=1.0)
        assert p.applies
        assert p.ideal.td_s == pytest.approx(td_step, rel=0.35)
        td_plus = 0.15 * (1 - kappa) * tu / (1 + 0.95 * kappa)
        if lt >= 1.0:
            assert abs(td_plus / td_step - 1) > 0.45


def loop_value(proposal, name, w):
    """C(jω)G(jω) with the controller built in python-control from the ideal form."""
    k, ti, td = proposal.ideal.k, proposal.ideal.ti_s, proposal.ideal.td_s
    c = control.tf([k * ti * td, k * ti, k], [ti, 0])
    return complex(c(1j * w)) * g(name, w)


@pytest.mark.parametrize("name", list(PLANTS))
@pytest.mark.parametrize("margin", [30.0, 45.0, 60.0])
@pytest.mark.parametrize("w_rel", [0.4, 0.7, 1.0])
def test_phase_margin_design_meets_its_defining_property(name, margin, w_rel):
    # Åström & Hägglund (1984): the designed loop passes through e^{j(−180°+φm)} at ω0,
    # i.e. |C G| = 1 and arg C G = −180° + φm; evaluated with python-control.
    _, wu = ultimate(name)
    w0 = w_rel * wu
    point = FrequencyPoint.from_complex(g(name, w0), w0)
    for kind in ("PI", "PID"):
        p = phase_margin_design(point, margin_deg=margin, kind=kind)
        if not p.applies:
            assert kind == "PI" and p.details == {} and "lead" in p.reason
            continue
        lv = loop_value(p, name, w0)
        assert abs(lv) == pytest.approx(1.0, rel=1e-9)
        assert math.degrees(np.angle(lv)) == pytest.approx(-180 + margin, abs=1e-6)
        if kind == "PID":
            assert p.ideal.ti_s == pytest.approx(4 * p.ideal.td_s)


def test_phase_margin_design_at_ultimate_point():
    # At the ultimate point the design reduces to K = Ku·cos φm (docs/METHODS.md §2)
    p = phase_margin_design(FrequencyPoint(1 / 8.0, -180.0, 1.7321), margin_deg=45)
    assert p.ideal.k == pytest.approx(8.0 * math.cos(math.radians(45)))


def test_unstable_plant_rules():
    props = propose_from_ultimate(4.0, 1.2, plant="unstable")
    for p in props:
        if p.rule in ULTIMATE_RULES:
            assert not p.applies
            assert p.reason == "no ultimate point: loop is open-loop unstable"
            assert p.kp is None
    pm = [p for p in props if p.rule.startswith("astrom-hagglund-pm")]
    assert [p.rule for p in pm] == ["astrom-hagglund-pm-pi", "astrom-hagglund-pm-pid"]
    assert pm[1].applies


def test_direct_acting_point_design():
    # Speed-drive tilt plant θ/u = −c·s/(s² − a²) (docs/METHODS.md §4) with a = 8.8, c = 0.0625;
    # the board's loop is direct acting, so the loop is C·(−G): it must meet the property.
    a, c, w0 = 8.8, 0.0625, 15.0
    gval = complex(control.tf([-c, 0], [1, 0, -a * a])(1j * w0)) * np.exp(-1j * w0 * 0.004)
    point = FrequencyPoint.from_complex(gval, w0)
    props = propose_from_point(point, plant="unstable", margin_deg=50, direct_acting=True)
    for p in props:
        if p.rule.startswith("astrom-hagglund-pm") and p.applies:
            lv = -p.ideal.response(w0) * gval
            assert abs(lv) == pytest.approx(1.0)
            assert math.degrees(np.angle(lv)) == pytest.approx(-130.0, abs=1e-6)
        else:
            assert not p.applies


def test_point_off_ultimate_disables_ultimate_rules():
    off = propose_from_point(FrequencyPoint(0.2, -150.0, 2.0), static_gain=1.0)
    assert all(not p.applies for p in off if p.rule in ULTIMATE_RULES)
    near = propose_from_point(FrequencyPoint(0.125, -181.0, 1.7321), static_gain=1.0)
    zn = next(p for p in near if p.rule == "ziegler-nichols-pid")
    assert zn.applies and zn.ideal.k == pytest.approx(4.8)
