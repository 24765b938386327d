"""The brush contact drop on the machine-library kernel (wound-field machines).

Setting (invented): the brushed machines of a fish-farm feed barge -- a series-wound auger
motor and a shunt-wound blower motor on the barge's 110 V bus, carbon brushes on both.

Model: a pair of brushes in the armature circuit, each a constant contact drop ``V_b`` in
the direction of the current; at zero current they block while ``|v_a - e| <= 2 V_b`` (the
pair behaves as two diodes). Source: A. E. Fitzgerald, C. Kingsley Jr., S. D. Umans,
*Electric Machinery*, 6th ed., ch. 7 (the brush contact drop of a DC machine, about 1 V per
carbon brush, nearly independent of current) -- from memory. The machines' equations as in
tests/test_wound_field.py (Chapman, *Electric Machinery Fundamentals*, ch. 9, from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from dcsim import load_scenario_text, simulate

VS = 110.0
VB = 1.0  # per brush [V] -- Fitzgerald & Kingsley ch. 7: "about 1 V" for carbon (from memory)
RA, LA, J, B = 0.6, 8e-3, 0.04, 0.004
RF_SER, LF_SER, M_SER = 0.2, 6e-3, 0.02  # series winding [ohm, H], L_af [H]
RF_SH, LF_SH, M_SH = 110.0, 5.5, 0.8  # shunt field [ohm, H], L_af [H]: 1 A, tau_f = 50 ms


def _text(kind: str, *, volts: float, duration: float, load: float = 0.0, locked: bool = False,
          drop: float = VB, record: str = "0.5 ms") -> str:  # fmt: skip
    if kind == "series":
        field = (
            f'kind = "series"\nfield_resistance = "{RF_SER} ohm"\n'
            f'field_inductance = "{LF_SER} H"\nmutual_inductance = "{M_SER} H"\n'
            'max_speed = "20000 rpm"\n'
        )
    else:
        field = (
            f'kind = "shunt"\nfield_resistance = "{RF_SH} ohm"\n'
            f'field_inductance = "{LF_SH} H"\nmutual_inductance = "{M_SH} H"\n'
        )
    return f"""
[simulation]
duration = "{duration} s"
record_interval = "{record}"
[motor]
resistance = "{RA} ohm"
inductance = "{LA} H"
inertia = "{J} kg*m^2"
viscous_friction = "{B} N*m*s/rad"
brush_drop = "{drop} V"
{field}
[load]
torque = "{load} N*m"
locked = {str(locked).lower()}
[supply]
voltage = "{VS} V"
[control]
voltage = "{volts} V"
"""


def _run(text: str):
    return simulate(load_scenario_text(text, source="barge.toml"))


@pytest.mark.parametrize("kind, r_loop", [("series", RA + RF_SER), ("shunt", RA)])
def test_locked_rotor_current_less_the_brush_drop(kind, r_loop):
    # Source: Fitzgerald & Kingsley ch. 7 (from memory) with Ohm's law: locked (no back-EMF),
    # i = (V - 2 V_b) / R_loop; the series field is in the loop, the shunt field is not.
    v = 12.0
    res = _run(_text(kind, volts=v, duration=0.5, locked=True))
    assert res.summary["final_current_A"] == pytest.approx((v - 2 * VB) / r_loop, rel=1e-9)


@pytest.mark.parametrize("kind", ["series", "shunt"])
def test_the_brushes_block_below_twice_their_drop(kind):
    # Source: the brush pair as two diodes (Fitzgerald & Kingsley ch. 7, from memory): at rest
    # with |v| <= 2 V_b no current flows at all, so no torque and no brush loss.
    res = _run(_text(kind, volts=1.5, duration=0.2))
    assert np.all(res.trace["current_A"] == 0.0)
    assert np.all(res.trace["speed_rad_s"] == 0.0)
    assert res.summary["energy_brush_drop_J"] == 0.0


def _shunt_rhs(v: float, load: float):
    def rhs(_t, y):
        i, w, i_f = y
        k = M_SH * i_f
        return [
            (v - RA * i - k * w - 2 * VB) / LA,
            (k * i - load - B * w) / J,
            (v - RF_SH * i_f) / LF_SH,
        ]

    return rhs


def test_shunt_start_with_the_brush_drop_against_radau():
    # Source: scipy.integrate.solve_ivp (Radau, rtol 1e-10) of the shunt machine's equations
    # with the drop 2 V_b in the armature loop; the current stays positive through the whole
    # start (checked), so the drop is the smooth constant term the reference has.
    load = 5.0
    res = _run(_text("shunt", volts=VS, duration=1.0, load=load))
    tr = res.trace
    t = tr["time_s"]
    sol = solve_ivp(_shunt_rhs(VS, load), (0.0, t[-1]), [0.0, 0.0, 0.0], method="Radau",
                    t_eval=t, rtol=1e-10, atol=1e-12)  # fmt: skip
    assert sol.success
    assert np.all(tr["current_A"][1:] > 0.0)
    # the same 1e-6 of each column's range as the wound-field transients (RK4 at h <= tau/10,
    # see TRANSIENT_RTOL in tests/test_wound_field.py)
    for name, ref in (("current_A", sol.y[0]), ("speed_rad_s", sol.y[1]),
                      ("field_current_A", sol.y[2])):  # fmt: skip
        scale = np.max(np.abs(ref))
        assert np.max(np.abs(tr[name] - ref)) <= 1e-6 * scale, name


def test_brush_drop_energy_and_the_closing_account():
    # Source: the brushes dissipate 2 V_b |i| (Fitzgerald & Kingsley ch. 7, from memory);
    # its integral against the trace (Simpson's rule on 0.05 ms rows) and conservation of
    # energy over the whole account.
    res = _run(_text("series", volts=60.0, duration=0.4, load=8.0, record="0.05 ms"))
    s, tr = res.summary, res.trace
    i = np.abs(tr["current_A"])
    h = tr["time_s"][1] - tr["time_s"][0]
    n = len(i) - 1 if (len(i) - 1) % 2 == 0 else len(i) - 2
    simpson = h / 3 * (i[0] + i[n] + 4 * i[1:n:2].sum() + 2 * i[2 : n - 1 : 2].sum())
    tail = 0.5 * h * (i[n] + i[-1]) if n < len(i) - 1 else 0.0
    assert s["energy_brush_drop_J"] == pytest.approx(2 * VB * (simpson + tail), rel=1e-6)
    largest = max(abs(v) for k, v in s.items() if k.endswith("_J") and "residual" not in k)
    assert abs(s["energy_balance_residual_J"]) <= 1e-6 * largest


def test_series_free_running_speed_with_the_brush_drop():
    # Source: derived from the series machine's steady state (Chapman ch. 9, from memory):
    # K = M i, M i^2 = T_L + B w and V - 2 V_b = (R_a + R_f) i + M i w; eliminating w,
    # M i^2 - T_L - B (V - 2 V_b - R i) / (M i) = 0 -- solved for i by numpy's roots of the
    # cubic M^2 i^3 + B R i - M T_L i - B (V - 2 V_b) = 0.
    v, load = 60.0, 8.0
    # 8 s: the series machine's slow mode here is 0.32 s (eigenvalues -199 and -3.1 1/s of
    # the equations linearised at the steady state, numpy.linalg.eigvals), so 25 of it leave
    # e^-25 of the start-up gap, far below the 1e-6 compared
    res = _run(_text("series", volts=v, duration=8.0, load=load, record="10 ms"))
    r = RA + RF_SER
    roots = np.roots([M_SER**2, 0.0, B * r - M_SER * load, -B * (v - 2 * VB)])
    i = max(z.real for z in roots if abs(z.imag) < 1e-9 and z.real > 0)
    w = (v - 2 * VB - r * i) / (M_SER * i)
    assert res.summary["final_current_A"] == pytest.approx(i, rel=1e-6)
    assert res.summary["final_speed_rad_s"] == pytest.approx(w, rel=1e-6)
