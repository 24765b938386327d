"""The plants each loop sees, built from a scenario's parameters with python-control.

Models (SI units; ``s`` the Laplace variable):

- current loop: the armature current from the armature voltage. With the rotor free,
  ``i/v = (J s + B) / ((L s + R)(J s + B) + K^2)`` (the back-EMF couples the shaft in; from
  ``L di/dt = v - R i - K w`` and ``J dw/dt = K i - B w``, e.g. Hughes & Drury, *Electric Motors
  and Drives*, ch. 3-4); with the rotor locked or the back-EMF fed forward,
  ``i/v = 1 / (L s + R)``;
- speed loop: the speed from the current command through the closed current loop (its
  scenario gains, discretised as the firmware runs it), ``K / (J s + B)`` after it, and the
  speed measurement's first-order filter if the scenario has one;
- position loop: the angle from the speed command through the closed speed loop and ``1/s``.

Sampling effects: every loop's plant is seen through a zero-order hold and, with
``control.computation_delay``, one more sample of delay. Two models are built for each loop and
every result says which it used:

- ``"discrete"``: exact -- the continuous plant discretised by ``control.sample_system(...,
  method="zoh")`` at the loop's sample time, times ``z^-d`` for the computation delay (inner
  loops, which run faster, are closed in discrete time at their own rate and then sampled
  again at the outer rate);
- ``"continuous"``: the continuous plant with the sampling approximated as a delay of half a
  sample (the zero-order hold) plus the computation delay, as a Pade approximant (order 3).

The tuning rules need simple parameters too: :attr:`LoopPlant.gain`,
:attr:`LoopPlant.time_constant_s` (the dominant lag, ``inf`` for an integrating plant) and
:attr:`LoopPlant.small_time_constant_s` (the sum of the small lags the rule lumps together:
sampling, delay, filters, and the closed inner loop's equivalent time constant).

References
----------
.. [1] K. J. Astrom and B. Wittenmark, *Computer-Controlled Systems*, 3rd ed. (1997), ch. 2
   (zero-order-hold sampling) and sec. 8.2 (the hold as a delay of half a sample).
.. [2] H. Pade approximants of the delay: python-control ``control.pade``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import control
import numpy as np

from dcsim.errors import ScenarioError
from dcsim.scenario.schema import Loop, Scenario

LOOPS = ("current", "speed", "position")
PADE_ORDER = 3


@dataclass(frozen=True)
class LoopPlant:
    """What one loop controls, in both models.

    Attributes
    ----------
    loop : str
        ``"current"``, ``"speed"`` or ``"position"``.
    continuous : control.StateSpace
        Plant with the sampling as a Pade delay (input: the loop's output unit; output: the
        measured quantity).
    discrete : control.StateSpace
        Exact sampled plant at :attr:`sample_time_s` (zero-order hold, computation delay).
    continuous_no_delay : control.StateSpace
        The continuous plant without the sampling delay.
    sample_time_s : float
        The loop's sample time [s].
    delay_s : float
        The delay the continuous model uses: half a sample plus the computation delay [s].
    gain : float
        Static gain of the plant for the rules (for an integrating plant the gain of ``k/s``).
    time_constant_s : float
        Dominant time constant [s]; ``inf`` for an integrating plant.
    small_time_constant_s : float
        Sum of the small lags [s].
    integrating : bool
        The rules should treat the plant as ``k / s`` (speed with negligible friction,
        position).
    assumptions : tuple of str
        What the models assume, in words, for every result to carry.
    """

    loop: str
    continuous: control.StateSpace
    discrete: control.StateSpace
    continuous_no_delay: control.StateSpace
    sample_time_s: float
    delay_s: float
    gain: float
    time_constant_s: float
    small_time_constant_s: float
    integrating: bool
    assumptions: tuple[str, ...]


def controller_tf(
    kp: float, ki: float, kd: float, h: float, *, discretisation: str, tf_s: float = 0.0
) -> tuple[control.TransferFunction, control.TransferFunction]:
    """The loop's PID as ``(continuous C(s), discrete C(z))``, the latter exactly as
    :mod:`dcsim.controllers.pid` runs it (1-DOF part: setpoint weight 1, derivative on the
    error for the loop transfer, which is the same for the feedback path).

    Integral: backward Euler ``ki h z/(z-1)``, forward Euler ``ki h/(z-1)``, Tustin
    ``ki h (z+1)/(2(z-1))``; derivative with filter ``T_f``: backward difference
    ``kd (z-1)/((T_f+h) z - T_f)``, or Tustin ``2 kd (z-1)/((2T_f+h) z + (h-2T_f))``.
    """
    s = control.tf("s")
    c = control.tf([kp], [1])
    if ki:
        c = c + ki / s
    if kd:
        c = c + kd * s / (1 + tf_s * s)
    c_c = control.tf(c)
    z = control.tf([1, 0], [1], h)
    cz = control.tf([kp], [1], h)
    if ki:
        if discretisation == "forward-euler":
            cz = cz + ki * h / (z - 1)
        elif discretisation == "tustin":
            cz = cz + ki * h * (z + 1) / (2 * (z - 1))
        else:
            cz = cz + ki * h * z / (z - 1)
    if kd:
        if discretisation == "tustin":
            cz = cz + 2 * kd * (z - 1) / ((2 * tf_s + h) * z + (h - 2 * tf_s))
        else:
            cz = cz + kd * (z - 1) / ((tf_s + h) * z - tf_s)
    return c_c, control.minreal(cz, verbose=False)


def _loop_resistance(sc: Scenario) -> float:
    """Armature resistance plus the source's when no bus capacitor decouples it [ohm]."""
    m = sc.motor
    return m.resistance + (sc.supply.resistance if sc.supply.capacitance == 0 else 0.0)


def _mechanics(sc: Scenario) -> tuple[float, float, float]:
    """Torque constant [N*m/A], total inertia [kg*m^2] and viscous friction [N*m*s/rad]."""
    m = sc.motor
    return m.torque_constant, _inertia(sc), m.viscous_friction


def _inertia(sc: Scenario) -> float:
    """Total inertia at the motor shaft [kg*m^2] (a gear and a hoist referred through)."""
    from dcsim.engine.assemble import shaft_values

    return shaft_values(sc)["inertia"]


def _delay_z(n: int, h: float) -> control.TransferFunction:
    return control.tf([1], [1] + [0] * n, h) if n > 0 else control.tf([1], [1], h)


def _pade(delay_s: float) -> control.TransferFunction:
    if delay_s <= 0:
        return control.tf([1], [1])
    num, den = control.pade(delay_s, PADE_ORDER)
    return control.tf(num, den)


LINEAR_KINDS = ("permanent_magnet", "separately_excited")
"""Machine kinds whose loops the linear plants describe: the torque is ``K i`` with a ``K``
that does not depend on the loop's own output (a separately excited machine's field has its
own supply and is settled at ``field_voltage / field_resistance``)."""

_WHY_NOT_LINEAR = {
    "series": (
        "its flux follows the armature current (torque ~ M i^2, back-EMF ~ M i w) and the "
        "series winding is part of the armature loop, so no one linear plant holds"
    ),
    "compound": (
        "its series winding makes the flux follow the armature current and is part of the "
        "armature loop, and its shunt field follows the armature voltage the loop sets"
    ),
    "shunt": (
        "its field is across the armature terminals, so the flux follows the armature voltage "
        "the loop itself sets (near zero at standstill), not a fixed field current"
    ),
}


def machine_problem(sc: Scenario) -> str | None:
    """Why the linear loop plants do not describe the scenario's machine, or ``None``.

    Only a machine with a torque ``K i`` and ``K`` independent of the loop (permanent magnet,
    separately excited with a settled field) has the plants of this module; for the other
    wound-field kinds the derived ``torque_constant`` (the flux at one field current) would
    give gains and margins that hold at one operating point at best.
    """
    kind = sc.motor.kind
    if kind in LINEAR_KINDS:
        return None
    why = _WHY_NOT_LINEAR.get(kind, "its flux is not constant")
    return (
        f"expected a machine with a constant torque constant for the linear loop plants "
        f"(motor.kind = {' or '.join(repr(k) for k in LINEAR_KINDS)}), found motor.kind = "
        f"{kind!r}: {why}; judge its loops in simulation instead (dcsim run, dcsim sweep over "
        "the gains)"
    )


def _machine_notes(sc: Scenario) -> list[str]:
    """What the plants leave out of a machine-library scenario, in words."""
    m, notes = sc.motor, []
    if m.kind == "separately_excited":
        note = (
            f"the separately excited field settled at field_voltage / field_resistance = "
            f"{m.field_voltage / m.field_resistance:.4g} A (K = {m.torque_constant:.4g} V*s/rad)"
        )
        if m.base_speed is not None:
            note += (
                f", below base_speed {m.base_speed:.4g} rad/s (above it the field is weakened "
                "and K, the plant gain with it, falls as 1/speed)"
            )
        notes.append(note)
    if m.commutator_segments is not None:
        notes.append("the commutator ripple left out (its mean K)")
    if sc.shaft is not None:
        notes.append("the shaft taken as rigid (the [shaft] two-mass resonance is not modelled)")
    return notes


def _loop(sc: Scenario, name: str, sample_time_s: float | None) -> Loop | None:
    loop = getattr(sc.control, name)
    if loop is None and sample_time_s is None:
        raise ScenarioError(
            f"expected a [control.{name}] table (its sample time at least), or a sample time "
            f"given to the tuner, found neither",
            source=sc.source,
            key=f"control.{name}",
        )
    return loop


def _equivalent_time_constant(t_cl) -> float:
    """Equivalent first-order time constant of a closed inner loop [s]: one over its -3 dB
    bandwidth (a first-order lag ``1/(1 + s T)`` has bandwidth ``1/T``; for a loop with a PI
    zero the low-frequency group delay understates the lag, the bandwidth does not). Common
    practice (no source) for lumping an inner loop into the outer loop's small lags."""
    from dcsim.tuning.analysis import _response, frequency_grid

    w = frequency_grid(t_cl)
    mag = np.abs(_response(t_cl, w))
    below = np.nonzero(mag < abs(mag[0]) / math.sqrt(2.0))[0]
    return float(1.0 / w[below[0]]) if below.size else float(1.0 / w[-1])


def armature_plant(sc: Scenario) -> tuple[control.TransferFunction, str]:
    """``i/v`` of the armature (continuous) and the assumption it rests on."""
    m, ld = sc.motor, sc.load
    r = m.resistance + (sc.supply.resistance if sc.supply.capacitance == 0 else 0.0)
    lo, k, j, b = m.inductance, m.torque_constant, _inertia(sc), m.viscous_friction
    s = control.tf("s")
    cur = sc.control.current
    if ld.locked or (cur is not None and cur.back_emf_feedforward):
        why = "rotor locked" if ld.locked else "back-EMF fed forward"
        return control.ss(1 / (lo * s + r)), f"current plant 1/(L s + R) ({why})"
    plant = (j * s + b) / ((lo * s + r) * (j * s + b) + k**2)
    why = "current plant with the back-EMF coupling, (J s + B)/((L s + R)(J s + B) + K^2)"
    return control.ss(plant), why


def loop_plant(
    sc: Scenario,
    loop: str,
    *,
    sample_time_s: float | None = None,
    inner: dict[str, tuple[float, float, float]] | None = None,
) -> LoopPlant:
    """The plant of ``loop`` in a scenario.

    Parameters
    ----------
    sc : Scenario
        The drive.
    loop : {"current", "speed", "position"}
        Which loop.
    sample_time_s : float, optional
        The loop's sample time [s] when the scenario has no table for it.
    inner : dict, optional
        ``{"current": (kp, ki, kd), ...}``: gains of the inner loops to use instead of the
        scenario's (the tuner passes the ones it has just chosen).
    """
    if loop not in LOOPS:
        raise ScenarioError(f"expected a loop, one of {', '.join(LOOPS)}, found {loop!r}")
    problem = machine_problem(sc)
    if problem is not None:
        raise ScenarioError(problem, source=sc.source, key="motor.kind")
    inner = inner or {}
    d = 1 if sc.control.computation_delay else 0
    tbl = _loop(sc, loop, sample_time_s)
    h = sample_time_s if sample_time_s is not None else tbl.sample_time
    notes = [
        f"sampled at {h:g} s through a zero-order hold"
        + (", one sample of computation delay on the voltage" if d else "")
    ]
    notes += _machine_notes(sc)
    s = control.tf("s")
    if loop == "current":
        pc, why = armature_plant(sc)
        notes.append(why)
        m = sc.motor
        r = m.resistance + (sc.supply.resistance if sc.supply.capacitance == 0 else 0.0)
        gain, tau, integrating = 1.0 / r, m.inductance / r, False
        small = 0.0
    else:
        inner_name = "current" if loop == "speed" else "speed"
        inner_loop = _closed_inner(sc, inner_name, inner)
        t_in_c, t_in_d, h_in = inner_loop
        notes.append(f"the {inner_name} loop closed with its gains (sampled at {h_in:g} s)")
        small = _equivalent_time_constant(t_in_d)
        if loop == "speed":
            k, j, b = _mechanics(sc)
            mech = k / (j * s + b)
            filt = control.tf([1], [1])
            sens = sc.sensors
            if sens is not None and sens.speed_filter > 0:
                filt = 1 / (sens.speed_filter * s + 1)
                small += sens.speed_filter
                notes.append(f"speed measured through a {sens.speed_filter:g} s low-pass")
            pc = control.ss(t_in_c) * control.ss(mech) * control.ss(filt)
            integrating = b * small * 50 < j  # friction pole far below the loop's band
            gain = k / j if integrating else k / b
            tau = math.inf if integrating else j / b
        else:
            pc = control.ss(t_in_c) * control.ss(1 / s)
            integrating, gain, tau = True, 1.0, math.inf
    # the hold of this loop's output; the computation delay acts on the voltage, i.e. in the
    # current loop (for the outer loops it is inside the closed inner loop already)
    delay = h / 2 + (d * h if loop == "current" else 0.0)
    small += delay
    p_cont = control.ss(pc) * control.ss(_pade(delay))
    p_disc = _discrete_plant(sc, loop, h, d, inner)
    return LoopPlant(
        loop=loop,
        continuous=p_cont,
        discrete=p_disc,
        continuous_no_delay=control.ss(pc),
        sample_time_s=h,
        delay_s=delay,
        gain=gain,
        time_constant_s=tau,
        small_time_constant_s=small,
        integrating=integrating,
        assumptions=tuple(notes),
    )


def _gains(sc: Scenario, name: str, inner: dict) -> tuple[float, float, float, Loop]:
    tbl = getattr(sc.control, name)
    if tbl is None:
        raise ScenarioError(
            f"expected a [control.{name}] table with its gains (the {name} loop is inside the "
            "loop being tuned), found none; tune it first and write it into the scenario",
            source=sc.source,
            key=f"control.{name}",
        )
    kp, ki, kd = inner.get(name, tbl.parallel_gains())
    return kp, ki, kd, tbl


def _closed_inner(sc: Scenario, name: str, inner: dict):
    """The closed ``name`` loop: (continuous, discrete at its own rate, its sample time)."""
    kp, ki, kd, tbl = _gains(sc, name, inner)
    h = tbl.sample_time
    c_c, c_d = controller_tf(
        kp, ki, kd, h, discretisation=tbl.discretisation, tf_s=tbl.derivative_filter
    )
    p = loop_plant(sc, name, inner=inner)
    t_c = control.feedback(control.ss(c_c) * p.continuous, 1)
    t_d = control.feedback(control.ss(c_d) * p.discrete, 1)
    return t_c, t_d, h


def motor_model(sc: Scenario, *, with_angle: bool = True) -> control.StateSpace:
    """The armature and shaft as a continuous state-space model: input the armature voltage
    [V], outputs ``[i, w, theta]`` [A, rad/s, rad] (the linear part of the drive equations:
    ``L di/dt = v - R i - K w``, ``J dw/dt = K i - B w``, ``dtheta/dt = w``).

    Only the states the loops can see are kept (a locked rotor: ``i`` alone; without
    ``with_angle``: ``i, w``), so that no unobservable integrator shows as a closed-loop
    pole on the stability boundary; the outputs of the states left out are zero rows.
    """
    m = sc.motor
    k, j, b = _mechanics(sc)
    r = _loop_resistance(sc)
    lo = m.inductance
    if sc.load.locked:
        a = np.array([[-r / lo]])
        c = np.array([[1.0], [0.0], [0.0]])
    elif with_angle:
        a = np.array([[-r / lo, -k / lo, 0.0], [k / j, -b / j, 0.0], [0.0, 1.0, 0.0]])
        c = np.eye(3)
    else:
        a = np.array([[-r / lo, -k / lo], [k / j, -b / j]])
        c = np.array([[1.0, 0.0], [0.0, 1.0], [0.0, 0.0]])
    bm = np.zeros((a.shape[0], 1))
    bm[0, 0] = 1.0 / lo
    return control.ss(a, bm, c, np.zeros((3, 1)))


def _sampled_motor(sc: Scenario, h: float, d: int, *, with_angle: bool = True):
    """:func:`motor_model` sampled with a zero-order hold at ``h``, its input delayed by
    ``d`` samples (the computation delay acts on the voltage only)."""
    p = control.sample_system(motor_model(sc, with_angle=with_angle), h, method="zoh")
    a, b, c = (np.asarray(x) for x in (p.A, p.B, p.C))
    for _ in range(d):
        n = a.shape[0]
        a = np.block([[a, b], [np.zeros((1, n)), np.zeros((1, 1))]])
        b = np.vstack([np.zeros((n, 1)), [[1.0]]])
        c = np.hstack([c, np.zeros((c.shape[0], 1))])
    return control.ss(a, b, c, np.zeros((c.shape[0], 1)), h)


def _close(plant: control.StateSpace, ctl, meas: int, ff: np.ndarray | None = None):
    """The loop ``u = C(z) (r - y[meas]) + ff . y`` around ``plant`` (strictly proper, all
    outputs kept): the system from ``r`` to the plant's outputs."""
    ap, bp, cp = (np.asarray(x) for x in (plant.A, plant.B, plant.C))
    c = control.ss(ctl)
    ac, bc, cc, dc = (np.asarray(x) for x in (c.A, c.B, c.C, c.D))
    cm = cp[meas : meas + 1]
    f = np.zeros((1, cp.shape[0])) if ff is None else np.asarray(ff).reshape(1, -1)
    top = np.hstack([ap + bp @ (f @ cp - dc @ cm), bp @ cc])
    bottom = np.hstack([-bc @ cm, ac])
    a = np.vstack([top, bottom])
    b = np.vstack([bp @ dc, bc])
    cout = np.hstack([cp, np.zeros((cp.shape[0], ac.shape[0]))])
    return control.ss(a, b, cout, np.zeros((cp.shape[0], 1)), plant.dt)


def _filtered(sys: control.StateSpace, index: int, t_f: float) -> control.StateSpace:
    """A backward-Euler low-pass ``y_f,k = a y_f,k-1 + (1 - a) y_k`` (``a = T_f/(T_f + h)``,
    as the controller runs it) on output ``index``, appended as a new last output."""
    a_, b_, c_ = (np.asarray(x) for x in (sys.A, sys.B, sys.C))
    h = sys.dt
    al = t_f / (t_f + h)
    ci = c_[index : index + 1]
    n = a_.shape[0]
    a = np.block([[a_, np.zeros((n, 1))], [(1 - al) * ci @ a_, np.array([[al]])]])
    b = np.vstack([b_, (1 - al) * ci @ b_])
    c = np.vstack(
        [np.hstack([c_, np.zeros((c_.shape[0], 1))]), np.hstack([np.zeros((1, n)), [[1.0]]])]
    )
    return control.ss(a, b, c, np.zeros((c.shape[0], 1)), h)


def _chain(sc: Scenario, upto: str, inner: dict) -> tuple[control.StateSpace, dict[str, int]]:
    """The exact sampled drive seen from the command of loop ``upto``, with every loop inside
    it closed at its own rate: ``(system at upto's sample time, output indices)``.

    The outputs are the plant's ``i, w, theta`` (indices 0, 1, 2) and, with a speed filter,
    the filtered speed (``"w_meas"``). Inner loops are lifted to the outer rate with the
    outer command held (:func:`_resample`).
    """
    d = 1 if sc.control.computation_delay else 0
    kp, ki, kd, tbl = _gains(sc, "current", inner)
    h_c = tbl.sample_time
    ff = np.array([0.0, sc.motor.torque_constant, 0.0]) if tbl.back_emf_feedforward else None
    _, c_d = controller_tf(
        kp, ki, kd, h_c, discretisation=tbl.discretisation, tf_s=tbl.derivative_filter
    )
    motor = _sampled_motor(sc, h_c, d, with_angle=upto == "position")
    closed = _close(motor, c_d, 0, ff)  # i_ref -> [i, w, theta] at h_c
    tbl_s = sc.control.speed
    if tbl_s is None:
        raise ScenarioError(
            "expected a [control.speed] table with its sample time, found none",
            source=sc.source,
            key="control.speed",
        )
    lifted = _resample(closed, max(1, round(tbl_s.sample_time / h_c)))
    idx = {"i": 0, "w": 1, "theta": 2, "w_meas": 1}
    sens = sc.sensors
    if sens is not None and sens.speed_filter > 0:
        lifted = _filtered(lifted, 1, sens.speed_filter)
        idx["w_meas"] = 3
    if upto == "speed":
        return lifted, idx
    kp, ki, kd, tbl = _gains(sc, "speed", inner)
    _, c_d = controller_tf(
        kp, ki, kd, tbl_s.sample_time, discretisation=tbl.discretisation, tf_s=tbl.derivative_filter
    )
    closed_s = _close(lifted, c_d, idx["w_meas"])  # w_ref -> outputs at h_s
    tbl_p = sc.control.position
    h_p = tbl_p.sample_time if tbl_p is not None else tbl_s.sample_time
    return _resample(closed_s, max(1, round(h_p / tbl_s.sample_time))), idx


def _discrete_plant(sc: Scenario, loop: str, h: float, d: int, inner: dict):
    """Exact sampled plant of ``loop`` at ``h``: the motor sampled at the current loop's
    rate and every inner loop closed at its own rate (no approximation beyond the linear
    model)."""
    if loop == "current":
        motor = _sampled_motor(sc, h, d, with_angle=False)
        tbl = sc.control.current
        if tbl is not None and tbl.back_emf_feedforward:
            zero = control.tf([0.0], [1.0], h)
            ff = np.array([0.0, sc.motor.torque_constant, 0.0])
            motor = _close(motor, zero, 0, ff)  # the feed-forward closes a loop of its own
        return motor[0, 0]
    sys, idx = _chain(sc, loop, inner)
    if loop == "speed":
        return sys[idx["w_meas"], 0]
    return sys[idx["theta"], 0]


def _resample(sys_fast: control.TransferFunction, n: int) -> control.TransferFunction:
    """A system at ``h_in`` driven by an input held for ``n`` samples, observed every ``n``-th
    sample: the lifted system at ``n h_in`` (Astrom & Wittenmark 1997, multirate sampling --
    from memory)."""
    if n == 1:
        return sys_fast
    ss = control.ss(sys_fast)
    a, b, c, d = (np.asarray(m) for m in (ss.A, ss.B, ss.C, ss.D))
    an = np.linalg.matrix_power(a, n)
    bn = sum(np.linalg.matrix_power(a, k) for k in range(n)) @ b
    return control.ss(an, bn, c, d, sys_fast.dt * n)
