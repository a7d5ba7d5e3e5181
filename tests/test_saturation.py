"""A saturating coil (Frölich–Kennelly λ(i) = L0·i/(1 + |i|/I_sat)) integrated in flux."""

from __future__ import annotations

import math

import pytest

from kickback import load_case, simulate
from kickback.case import Case, Clamp, Coil, Element, Supply, Switch

D = Element("diode", model="constant-drop", forward_voltage=0.7)
Z = Element("zener", voltage=20.0)


def lam(i, L0, isat):
    return L0 * i / (1 + abs(i) / isat)


def test_stored_energy_is_the_flux_integral():
    # W = ∫ i dλ = L0·I_sat²·(ln U + 1/U − 1), U = 1 + I/I_sat (derived); 0.1 H, 0.2 A, 0.12 A → 0.38001 mJ
    case = Case("sat (demo data)", Supply(24.0), Coil(0.1, 0.0, initial_current=0.12, saturation_current=0.2),
                Switch("ideal"), (Clamp("DZ", "coil", (D, Z)),))
    f = simulate(case).figures
    u = 1 + 0.12 / 0.2
    assert f.stored_energy_J == pytest.approx(0.1 * 0.2 ** 2 * (math.log(u) + 1 / u - 1), rel=1e-12)
    assert f.stored_energy_J == pytest.approx(0.38001e-3, rel=1e-4)
    assert f.stored_energy_J < 0.5 * 0.1 * 0.12 ** 2, "less than ½·L0·i² for a saturating core"
    # R = 0 and a constant clamp Vc: dλ/dt = −Vc, so the time to zero is λ(i0)/Vc (derived)
    assert f.to_zero_s == pytest.approx(lam(0.12, 0.1, 0.2) / 20.7, rel=1e-8)
    # all of it goes into the clamp: E = Vc·∫ i dt = stored energy
    assert f.clamps[0].energy_J == pytest.approx(f.stored_energy_J, rel=1e-8)
    assert abs(f.energy_balance_error) < 1e-8


def test_saturation_shortens_the_decay_and_keeps_the_ledger():
    diode = Element("diode", forward_voltage=0.85, at_current=1.0, ideality=1.9, series_resistance=0.05)
    sw = Switch("mosfet", on_resistance=0.05, fall_time=2e-7, capacitance=3e-10)

    def run(isat):
        return simulate(Case("c (demo data)", Supply(24.0), Coil(0.1, 30.0, saturation_current=isat), sw,
                             (Clamp("D", "coil", (diode,)),))).figures

    linear, soft, hard = run(None), run(3.0), run(0.3)
    # less flux at the same current: less energy and a faster decay as I_sat falls
    assert hard.stored_energy_J < soft.stored_energy_J < linear.stored_energy_J
    assert hard.to_zero_s < soft.to_zero_s < linear.to_zero_s
    for f in (linear, soft, hard):
        assert abs(f.energy_balance_error) < 1e-6


def test_case_key(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text('title = "sat (demo data)"\n[supply]\nvoltage = "12 V"\n[coil]\ninductance = "50 mH"\n'
                 'resistance = "20 Ω"\nsaturation_current = "0.4 A"\n[switch]\ntype = "ideal"\n'
                 '[[clamp]]\nacross = "coil"\n[[clamp.element]]\ntype = "diode"\nmodel = "constant-drop"\n'
                 'forward_voltage = "0.7 V"\n')
    assert load_case(p).coil.saturation_current == 0.4
    p.write_text(p.read_text().replace('"0.4 A"', '"0.4 V"'))
    with pytest.raises(ValueError, match="saturation_current"):
        load_case(p)


def test_scalar_coil_laws_match_the_array_laws_bit_for_bit():
    # the state equations read the coil current and energy of one state in plain float arithmetic
    # (kickback.coilstate): against the closed forms written here, i = λ·I_sat/(L0·I_sat − |λ|)
    # and W = L0·I_sat²·(ln U + 1/U − 1), U = 1 + |i|/I_sat (Frölich–Kennelly law, derived in
    # kickback/models/coil.py), and bit for bit against the same circuit's array path
    import numpy as np

    from kickback.circuit import Circuit
    from kickback.models.coil import incremental_inductance, stored_energy

    L0, isat = 0.3, 0.05
    case = Case("sat (demo data)", Supply(24.0), Coil(L0, 10.0, initial_current=0.04, saturation_current=isat),
                Switch("ideal"), (Clamp("DZ", "coil", (D, Z)),))
    c = Circuit(case)
    rng = np.random.default_rng(3)
    lam_max = L0 * isat
    xs = np.concatenate([rng.uniform(-1.5, 1.5, 2000), rng.uniform(-1e-3, 1e-3, 500), [0.0, 0.999, -0.9991]]) * lam_max
    cur = np.array([c.coil_current(float(x)) for x in xs])
    assert np.array_equal(cur, c.coil_current(xs))
    inside = np.abs(xs) < 0.999 * lam_max
    ref = xs * isat / (L0 * isat - np.abs(xs))
    np.testing.assert_allclose(cur[inside], ref[inside], rtol=1e-13, atol=0)
    # continued linearly past 0.999·L0·I_sat (i = 999·I_sat there) with the slope there, L0/1000²
    ax = np.abs(xs[~inside])
    lin = 999 * isat + (ax - 0.999 * lam_max) / (L0 / 1000 ** 2)
    np.testing.assert_allclose(np.abs(cur[~inside]), lin, rtol=1e-9)
    i = np.concatenate([rng.uniform(-3, 3, 2000) * isat, rng.uniform(-0.02, 0.02, 60000) * isat, [0.0, 0.01 * isat]])
    w = np.array([c.coil_energy(float(x)) for x in i])
    assert np.array_equal(w, stored_energy(i, L0, isat))
    gain = np.array([c.state_gain(float(x))[0] for x in i])  # di/dλ = 1/L_inc = (1 + |i|/I_sat)²/L0
    assert np.array_equal(gain, [1.0 / float(incremental_inductance(float(x), L0, isat)) for x in i])
    np.testing.assert_allclose(gain, (1 + np.abs(i) / isat) ** 2 / L0, rtol=1e-14)
    u = 1 + np.abs(i) / isat
    big = np.abs(i) > 0.05 * isat  # the closed form cancels below; the series is checked against ½·L0·i²
    np.testing.assert_allclose(w[big], L0 * isat ** 2 * (np.log(u) + 1 / u - 1)[big], rtol=1e-12)
    small = np.abs(i) < 1e-4 * isat
    np.testing.assert_allclose(w[small], 0.5 * L0 * i[small] ** 2, rtol=2e-4)
