"""A load inertia that engages or lets go mid-run (an event on ``load.inertia``).

Setting (invented): a sample-mixer drive spinning up on its own, then a flywheel clutch
closes (the flywheel at rest engages the shaft), later the clutch opens again.

Source: conservation of angular momentum in a perfectly inelastic coupling
(Meriam & Kraige, *Engineering Mechanics: Dynamics*, angular impulse and momentum -- chapter
from memory): the engaging inertia ``J2`` (at rest) and the shaft ``J1`` share one speed
``w' = J1 w / (J1 + J2)``; the coupling dissipates ``J1 J2 w^2 / (2 (J1 + J2))``. A released
inertia keeps its speed and carries off ``J2 w^2 / 2``; the shaft's speed does not jump.
Between the events the drive is the linear two-state model, checked piecewise against its
closed form (scipy.linalg.expm, in :func:`reference.linear_response`).
"""

from __future__ import annotations

import numpy as np
from reference import build_scenario, linear_response, relative_error, simulate_checked

MIXER = dict(resistance=1.5, inductance=1.2e-3, torque_constant=0.04, inertia=8e-5,
             viscous_friction=2e-6)  # fmt: skip
J2 = 2.4e-4  # flywheel [kg*m^2]
V = 12.0
T_ON, T_OFF, T_END = 0.2, 0.5, 0.8
STATE_TOL = 1e-9  # exact propagation; rounding of expm over ~1e4 steps


def _mixer():
    return build_scenario(
        duration=T_END,
        record_interval=1e-4,
        motor=MIXER,
        supply=dict(voltage=V),
        voltage=V,
        events=[(T_ON, {"load.inertia": J2}), (T_OFF, {"load.inertia": 0.0})],
        title="sample mixer: flywheel clutch closes, then opens",
    )


def test_flywheel_engaging_and_releasing():
    res = simulate_checked(_mixer())  # also asserts the energy account closes
    tr, s = res.trace, res.summary
    t = tr["time_s"]
    m = dict(R=MIXER["resistance"], L=MIXER["inductance"], K=MIXER["torque_constant"],
             B=MIXER["viscous_friction"])  # fmt: skip
    J1 = MIXER["inertia"]

    first = linear_response(np.array([T_ON]), **m, J=J1, voltage=V)
    i_on, w_on = float(first.current[0]), float(first.speed[0])
    w_shared = J1 * w_on / (J1 + J2)
    k_on = int(np.flatnonzero(np.isclose(t, T_ON, rtol=0, atol=1e-12))[0])
    # the row at the event instant holds the state just after it
    assert abs(tr["speed_rad_s"][k_on] / w_shared - 1.0) <= STATE_TOL
    assert abs(tr["current_A"][k_on] / i_on - 1.0) <= STATE_TOL  # the current does not jump

    mid = (t >= T_ON) & (t <= T_OFF)
    x_on = (i_on, w_shared, float(first.position[0]))
    second = linear_response(t[mid], **m, J=J1 + J2, voltage=V, x0=x_on, t0=T_ON)
    assert relative_error(tr["speed_rad_s"][mid], second.speed) <= STATE_TOL
    assert relative_error(tr["current_A"][mid], second.current) <= STATE_TOL

    w_off = float(second.speed[-1])
    loss_on = 0.5 * J1 * J2 / (J1 + J2) * w_on**2
    carried_off = 0.5 * J2 * w_off**2
    assert abs(s["energy_coupling_J"] / (loss_on + carried_off) - 1.0) <= STATE_TOL

    after = t >= T_OFF
    x_off = (float(second.current[-1]), w_off, float(second.position[-1]))
    third = linear_response(t[after], **m, J=J1, voltage=V, x0=x_off, t0=T_OFF)
    assert relative_error(tr["speed_rad_s"][after], third.speed) <= STATE_TOL
    # kinetic term of the account: the rotor alone at the end, from rest
    assert abs(s["kinetic_energy_change_J"] / (0.5 * J1 * third.speed[-1] ** 2) - 1.0) <= 1e-12
