"""``tune``: a scenario's loop, a published method and its targets -> gains and their figures.

Methods (contract names) and the plant form each rule assumes (see :mod:`dcsim.tuning.rules`
for the formulas and sources):

=====================  =========================================================================
``imc``                current loop: pole-zero cancellation of ``1/(L s + R)`` for a target
                       bandwidth; speed loop: the same on ``K/(J s + B)``; position loop: a P
                       (or PI) gain for a target bandwidth on the closed speed loop
``modulus-optimum``    first-order plant plus the small lags (Kessler)
``symmetric-optimum``  integrating plant plus the small lags, parameter ``a``
``simc``               first-order (or integrating) plant with the small lags as delay
``ziegler-nichols``    the ultimate gain and period of the sampled loop under P control
``scenario``           no tuning: the figures of the gains the scenario already has
``optimise``           the largest crossover frequency with PM >= pm_min, GM >= gm_min,
                       Ms <= ms_max and the PI zero within a decade below crossover
                       (Nelder-Mead from a grid of starts on a penalty, scipy.optimize)
=====================  =========================================================================
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field, replace

import control
import numpy as np
from scipy import optimize

from dcsim.errors import ScenarioError
from dcsim.scenario.schema import Scenario
from dcsim.tuning import rules
from dcsim.tuning.analysis import LoopFigures, analyse
from dcsim.tuning.plants import LOOPS, LoopPlant, controller_tf, loop_plant

METHODS = (
    "imc",
    "modulus-optimum",
    "symmetric-optimum",
    "simc",
    "ziegler-nichols",
    "optimise",
    "scenario",
)
"""Tuning methods; ``"scenario"`` analyses the gains the scenario already has."""
MODELS = ("discrete", "continuous")
UNITS = {
    "current": ("A", "V"),
    "speed": ("rad/s", "A"),
    "position": ("rad", "rad/s"),
}
"""Input (measured) and output units of each loop."""


@dataclass(frozen=True)
class TuningResult:
    """Gains of one loop and what they give.

    Attributes
    ----------
    loop, method, model : str
        The loop, the method, and the plant model the figures come from (``"discrete"``:
        exact sampled; ``"continuous"``: Pade approximation of the sampling delay).
    kp, ki, kd : float
        Parallel-form gains [SI of the loop].
    figures : LoopFigures
        Margins, peaks, bandwidth and step metrics of the loop with these gains.
    sample_time_s : float
        [s]
    prefilter_time_s : float or None
        Reference prefilter the method calls for [s].
    assumptions : tuple of str
        The plant, the sampling model and the rule's premises, in words.
    worst_case : dict or None
        The figures at the worst corner of the tolerances, when tolerances were given.
    cautions : tuple of str
        E.g. the aggressiveness of Ziegler-Nichols.
    """

    loop: str
    method: str
    model: str
    kp: float
    ki: float
    kd: float
    figures: LoopFigures
    sample_time_s: float
    prefilter_time_s: float | None = None
    assumptions: tuple[str, ...] = ()
    worst_case: dict | None = None
    cautions: tuple[str, ...] = ()
    discretisation: str = "backward-euler"
    scenario_keys: dict = field(default_factory=dict)

    def discrete_coefficients(self) -> dict[str, float]:
        """The coefficients the firmware loop runs per sample (velocity form).

        ``u_k = u_{k-1} + q0 e_k + q1 e_{k-1}`` for the backward-Euler PI
        (``q0 = kp + ki h``, ``q1 = -kp``), Tustin (``q0 = kp + ki h/2``,
        ``q1 = -kp + ki h/2``) or forward Euler (``q0 = kp``, ``q1 = -kp + ki h``); and the
        position-form pair ``kp`` and ``ki h`` (the integral's increment per unit error).
        Source: Astrom & Wittenmark, *Computer-Controlled Systems* (1997), sec. 8.2 and the
        velocity (incremental) form of sec. 8.6 -- sections from memory.
        """
        h = self.sample_time_s
        if self.discretisation == "tustin":
            q0, q1 = self.kp + self.ki * h / 2, -self.kp + self.ki * h / 2
        elif self.discretisation == "forward-euler":
            q0, q1 = self.kp, -self.kp + self.ki * h
        else:
            q0, q1 = self.kp + self.ki * h, -self.kp
        return {"q0": q0, "q1": q1, "kp": self.kp, "ki_h": self.ki * h}

    def fixed_point(
        self, *, q_bits: int = 15, input_base: float = 1.0, output_base: float = 1.0
    ) -> dict[str, dict[str, float | int]]:
        """The per-sample coefficients in a Q format, with the base values stated.

        A quantity ``x`` is held as ``round(x / base * 2^q_bits)``; a gain from input to
        output in per unit is ``g input_base / output_base``. A per-unit gain of 1 or more
        does not fit a Q15 word: each coefficient is given as a mantissa and a left shift
        ``n`` (``g_pu = mantissa 2^(n - q_bits)``) so that ``|mantissa| < 2^q_bits``.
        """
        out: dict[str, dict[str, float | int]] = {}
        for name, value in self.discrete_coefficients().items():
            g = value * input_base / output_base
            shift = 0
            while abs(g) / 2.0**shift >= 1.0:
                shift += 1
            mant = round(g / 2.0**shift * 2**q_bits)
            if abs(mant) >= 2**q_bits:  # rounding up to the full scale
                shift += 1
                mant = round(g / 2.0**shift * 2**q_bits)
            out[name] = {
                "per_unit": g,
                "mantissa": int(mant),
                "shift": shift,
                "represents": mant * 2.0 ** (shift - q_bits),
            }
        out["base"] = {"input": input_base, "output": output_base, "q_bits": q_bits}
        return out

    def as_dict(self) -> dict:
        """A JSON-ready dict (the contract's keys first)."""
        f = self.figures
        d = {
            "kp": self.kp,
            "ki": self.ki,
            "kd": self.kd,
            "phase_margin_deg": f.phase_margin_deg,
            "gain_margin_dB": f.gain_margin_dB,
            "crossover_rad_s": f.crossover_rad_s,
            "bandwidth_rad_s": f.bandwidth_rad_s,
            "method": self.method,
            "loop": self.loop,
            "model": self.model,
            "delay_margin_s": f.delay_margin_s,
            "ms": f.ms,
            "mt": f.mt,
            "overshoot_percent": f.overshoot_percent,
            "rise_time_s": f.rise_time_s,
            "settling_time_s": f.settling_time_s,
            "stable": f.stable,
            "sample_time_s": self.sample_time_s,
            "prefilter_time_s": self.prefilter_time_s,
            "discrete_coefficients": self.discrete_coefficients(),
            "assumptions": list(self.assumptions),
            "cautions": list(self.cautions),
        }
        if self.worst_case is not None:
            d["worst_case"] = self.worst_case
        return {
            k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in d.items()
        }


def _nonfinite(v) -> bool:
    return isinstance(v, float) and not math.isfinite(v)


def _loop_tf(plant: LoopPlant, kp, ki, kd, model: str, discretisation: str, tf_s: float):
    c_c, c_d = controller_tf(
        kp, ki, kd, plant.sample_time_s, discretisation=discretisation, tf_s=tf_s
    )
    # state space throughout: products of high-order polynomials lose their accuracy
    if model == "discrete":
        return control.ss(c_d) * plant.discrete
    return control.ss(c_c) * plant.continuous


def _prefilter(t_s: float | None, h: float, model: str):
    if not t_s:
        return None
    if model == "discrete":
        a = t_s / (t_s + h)
        return control.tf([1 - a, 0], [1, -a], h)
    return control.tf([1], [t_s, 1])


def tune(
    sc: Scenario,
    loop: str,
    method: str,
    *,
    bandwidth_rad_s: float | None = None,
    a: float = 2.0,
    tau_c_s: float | None = None,
    pm_min_deg: float = 60.0,
    gm_min_dB: float = 6.0,
    ms_max: float = 1.6,
    model: str = "discrete",
    sample_time_s: float | None = None,
    tolerances: dict[str, float] | None = None,
    with_integral: bool = False,
) -> TuningResult:
    """Gains of ``loop`` by ``method`` and the figures they give.

    Parameters
    ----------
    sc : Scenario
        The drive (the inner loops' gains are taken from it).
    loop : {"current", "speed", "position"}
    method : str
        One of :data:`METHODS`.
    bandwidth_rad_s : float, optional
        Target bandwidth [rad/s] (``imc``); default a tenth of the sampling frequency
        (current), a tenth of the inner loop's bandwidth (outer loops).
    a : float
        Symmetric-optimum parameter (``a > 1``; 2 is the classical choice).
    tau_c_s : float, optional
        SIMC closed-loop time constant [s]; default the plant's effective delay.
    pm_min_deg, gm_min_dB, ms_max : float
        Constraints of ``optimise``.
    model : {"discrete", "continuous"}
        Plant model the figures (and ``optimise``) use.
    sample_time_s : float, optional
        The loop's sample time when the scenario has no table for it [s].
    tolerances : dict, optional
        ``{"motor.resistance": 0.1, ...}`` relative half-widths: the figures are recomputed at
        every corner and the worst reported.
    with_integral : bool
        Position loop with ``imc``: a PI instead of a P.

    Raises
    ------
    ScenarioError
        Unknown loop, method or model; a scenario without the inner loops' gains.
    """
    if loop not in LOOPS:
        raise ScenarioError(f"expected a loop, one of {', '.join(LOOPS)}, found {loop!r}")
    if method not in METHODS:
        raise ScenarioError(f"expected a method, one of {', '.join(METHODS)}, found {method!r}")
    if model not in MODELS:
        raise ScenarioError(f"expected a model, one of {', '.join(MODELS)}, found {model!r}")
    plant = loop_plant(sc, loop, sample_time_s=sample_time_s)
    tbl = getattr(sc.control, loop)
    disc = tbl.discretisation if tbl is not None else "backward-euler"
    tf_s = tbl.derivative_filter if tbl is not None else 0.0
    h = plant.sample_time_s
    cautions: list[str] = []
    notes = list(plant.assumptions)
    prefilter = None
    if method == "scenario":
        if tbl is None:
            raise ScenarioError(
                f"expected a [control.{loop}] table with gains to analyse, found none",
                source=sc.source,
                key=f"control.{loop}",
            )
        kp0, ki0, kd0 = tbl.parallel_gains()
        g = rules.Gains(kp=kp0, ki=ki0, kd=kd0, method="scenario", notes="the scenario's gains")
    elif method == "imc":
        alpha = bandwidth_rad_s or _default_bandwidth(sc, loop, plant)
        if loop == "position":
            kp, ki = alpha, (alpha**2 / 4.0 if with_integral else 0.0)
            notes.append(
                f"P{'I' if with_integral else ''} on the closed speed loop for a bandwidth of "
                f"{alpha:.4g} rad/s (kp = bandwidth; ki = kp^2/4: common practice)"
            )
            g = rules.Gains(kp=kp, ki=ki, method="imc")
        elif plant.integrating and loop == "speed":
            # the IMC-derived rule for an integrating plant with the small lags as a delay:
            # closed-loop time constant 1/alpha (Skogestad 2003)
            g = rules.simc_integrating(plant.gain, plant.small_time_constant_s, 1.0 / alpha)
            g = replace(g, method="imc")
            notes.append(
                f"IMC-based PI on K/(J s) with the small lags as a delay, closed-loop time "
                f"constant 1/{alpha:.4g} rad/s (friction negligible)"
            )
        else:
            g = rules.imc_first_order(plant.gain, plant.time_constant_s, alpha)
            notes.append(f"IMC pole-zero cancellation for a bandwidth of {alpha:.4g} rad/s")
    elif method == "modulus-optimum":
        if plant.integrating:
            raise ScenarioError(
                f"expected a plant with a dominant lag for the modulus optimum; the {loop} "
                "plant is integrating here: use symmetric-optimum",
                source=sc.source,
                key=f"control.{loop}",
            )
        g = rules.modulus_optimum(plant.gain, plant.time_constant_s, plant.small_time_constant_s)
    elif method == "symmetric-optimum":
        k_int = plant.gain
        if not plant.integrating:
            # above its corner 1/T1 the lag k/(1 + s T1) acts as the integrator k/(s T1)
            k_int = plant.gain / plant.time_constant_s
            notes.append(
                f"the plant's lag T1 = {plant.time_constant_s:.4g} s taken as an integrator "
                "k/(s T1) (valid above 1/T1)"
            )
        g = rules.symmetric_optimum(k_int, plant.small_time_constant_s, a=a)
        prefilter = g.prefilter_time_s
    elif method == "simc":
        theta = plant.small_time_constant_s
        if plant.integrating:
            g = rules.simc_integrating(plant.gain, theta, tau_c_s)
        else:
            g = rules.simc(plant.gain, plant.time_constant_s, theta, tau_c_s)
        notes.append(f"small lags lumped into a delay of {theta:.4g} s")
    elif method == "ziegler-nichols":
        p_loop = plant.discrete if model == "discrete" else plant.continuous
        try:
            ku, pu = rules.ultimate_from_loop(p_loop)
        except ScenarioError as err:
            raise ScenarioError(
                f"the {loop} loop under P control has no finite ultimate gain below the "
                f"Nyquist frequency ({err.detail}); Ziegler-Nichols does not apply -- with a "
                "computation delay (control.computation_delay = true) it does, or choose "
                "another method",
                source=sc.source,
                key=f"control.{loop}",
            ) from None
        g = rules.ziegler_nichols(ku, pu, kind="PI")
        cautions.append(
            "Ziegler-Nichols aims at quarter-amplitude decay: expect little phase margin and "
            "a large overshoot; check the margins before use"
        )
    else:
        g = _optimise(plant, model, disc, tf_s, pm_min_deg, gm_min_dB, ms_max)
        notes.append(
            f"largest crossover with PM >= {pm_min_deg:g} deg, GM >= {gm_min_dB:g} dB, "
            f"Ms <= {ms_max:g}"
        )
    if g.notes:
        notes.append(g.notes)
    loop_tf = _loop_tf(plant, g.kp, g.ki, g.kd, model, disc, tf_s)
    figures = analyse(loop_tf, prefilter=_prefilter(prefilter, h, model))
    notes.append(
        "figures from the exact sampled model (zero-order hold)"
        if model == "discrete"
        else "figures from the continuous model with the sampling as a Pade delay"
    )
    if not figures.stable:
        cautions.append("the loop is UNSTABLE with these gains")
    worst = None
    if tolerances:
        worst = _worst_case(sc, loop, g, model, disc, tf_s, tolerances, sample_time_s, prefilter)
    keys = {f"control.{loop}.kp": g.kp, f"control.{loop}.ki": g.ki}
    if g.kd:
        keys[f"control.{loop}.kd"] = g.kd
    return TuningResult(
        loop=loop,
        method=method,
        model=model,
        kp=float(g.kp),
        ki=float(g.ki),
        kd=float(g.kd),
        figures=figures,
        sample_time_s=h,
        prefilter_time_s=prefilter,
        assumptions=tuple(notes),
        worst_case=worst,
        cautions=tuple(cautions),
        discretisation=disc,
        scenario_keys=keys,
    )


def _default_bandwidth(sc: Scenario, loop: str, plant: LoopPlant) -> float:
    """A tenth of the sampling frequency (in rad/s) for the current loop; for an outer loop a
    quarter of ``1 / T_sigma``, the bandwidth its small lags (the closed inner loop, the
    hold, filters) leave (common practice, no source: cascaded loops 5-10x apart, sampling
    10-20x the bandwidth)."""
    if loop == "current":
        return 2 * math.pi / plant.sample_time_s / 10.0
    return 0.25 / plant.small_time_constant_s


def _optimise(plant, model, disc, tf_s, pm_min, gm_min, ms_max) -> rules.Gains:
    """Largest crossover under the constraints, over (log kp, log Ti): Nelder-Mead on a
    penalty of the violated constraints, from a grid of starts.

    The search evaluates the loop on a fixed frequency grid (the plant's response computed
    once, the PI's in closed form), which is fast; the figures reported afterwards come from
    :func:`~dcsim.tuning.analysis.analyse` on the loop itself.
    """
    from dcsim.tuning.analysis import _response

    h = plant.sample_time_s
    p_sys = plant.discrete if model == "discrete" else plant.continuous
    top = math.pi / h * 0.999 if model == "discrete" else 20 * math.pi / h
    w = np.logspace(math.log10(top) - 6, math.log10(top), 3000)
    pw = _response(p_sys, w)
    if model == "discrete":
        z = np.exp(1j * w * h)
        integ = {
            "forward-euler": h / (z - 1),
            "tustin": h * (z + 1) / (2 * (z - 1)),
        }.get(disc, h * z / (z - 1))
    else:
        integ = 1.0 / (1j * w)

    def figures(x):
        kp, ti = math.exp(x[0]), math.exp(x[1])
        lw = (kp + kp / ti * integ) * pw
        mag = np.abs(lw)
        above = np.nonzero(mag >= 1.0)[0]
        if above.size == 0 or above[-1] == w.size - 1:
            return 0.0, -180.0, -100.0, 100.0
        k = above[-1]
        f = math.log(mag[k]) / (math.log(mag[k]) - math.log(mag[k + 1]))
        wc = math.exp(math.log(w[k]) + f * (math.log(w[k + 1]) - math.log(w[k])))
        ang = math.degrees(np.angle(lw[k] + f * (lw[k + 1] - lw[k])))
        pm = ang + 180.0 if ang <= 0 else ang - 180.0
        im = lw.imag[k:]
        cross = np.nonzero((np.sign(im[:-1]) != np.sign(im[1:])) & (lw.real[k:-1] < 0))[0]
        gm = -20 * math.log10(mag[k + cross[0]]) if cross.size else 100.0
        ms = float(np.max(1.0 / np.abs(1.0 + lw)))
        return wc, pm, gm, ms

    ss = control.ss(p_sys)
    ap, bp, cp = (np.asarray(m) for m in (ss.A, ss.B, ss.C))

    def stable(kp, ki):
        """The closed loop's poles (PI and plant in state space, the reference at zero)."""
        if model == "discrete":
            # backward Euler: s_{k+1} = s_k + ki h e_k, u_k = s_k + (kp + ki h) e_k
            a_cl = np.block([[ap - (kp + ki * h) * bp @ cp, bp], [-ki * h * cp, np.ones((1, 1))]])
            return bool(np.max(np.abs(np.linalg.eigvals(a_cl))) < 1.0)
        a_cl = np.block([[ap - kp * bp @ cp, ki * bp], [-cp, np.zeros((1, 1))]])
        return bool(np.max(np.linalg.eigvals(a_cl).real) < 0.0)

    def penalty(x):
        kp_, ti_ = math.exp(x[0]), math.exp(x[1])
        if (model == "continuous" or disc == "backward-euler") and not stable(kp_, kp_ / ti_):
            return 1e6 + x[0]  # unstable: push the gain down
        wc, pm, gm, ms = figures(x)
        short = max(0.0, pm_min - pm) / 10 + max(0.0, gm_min - gm) / 2 + max(0.0, ms - ms_max) * 5
        # integral action within a decade below crossover (T_i w_c <= 10; common practice,
        # no source): otherwise the largest crossover comes with a vanishing integral gain
        short += max(0.0, math.log(math.exp(x[1]) * max(wc, 1e-9) / 10.0))
        return -math.log(max(wc, 1e-9)) + 100.0 * short

    small = plant.small_time_constant_s
    tau = plant.time_constant_s if math.isfinite(plant.time_constant_s) else 16.0 * small
    k0 = 1.0 / (plant.gain * small * (1 if plant.integrating else 1 / tau))
    best = None
    for fk, ft in itertools.product((0.05, 0.2, 0.5, 1.0, 2.0), (0.5, 1.0, 4.0, 16.0)):
        x0 = [math.log(k0 * fk), math.log(max(tau, small) * ft)]
        opts = {"xatol": 1e-5, "fatol": 1e-8, "maxiter": 600}
        res = optimize.minimize(penalty, x0, method="Nelder-Mead", options=opts)
        if best is None or res.fun < best.fun:
            best = res
    kp, ti = math.exp(best.x[0]), math.exp(best.x[1])
    f = analyse(_loop_tf(plant, kp, kp / ti, 0.0, model, disc, tf_s))
    ok = (
        f.phase_margin_deg >= pm_min - 0.5
        and f.gain_margin_dB >= gm_min - 0.1
        and f.ms <= ms_max + 0.01
    )
    note = "optimised PI" + ("" if ok else " (constraints NOT all met: see the figures)")
    return rules.Gains(kp=kp, ki=kp / ti, method="optimise", notes=note)


_TOLERANCE_KEYS = (
    "motor.resistance",
    "motor.inductance",
    "motor.torque_constant",
    "motor.inertia",
    "motor.viscous_friction",
)


def _worst_case(sc, loop, g, model, disc, tf_s, tolerances, sample_time_s, prefilter):
    """The figures at every corner of the tolerances; the worst of each."""
    names = [k for k in tolerances if tolerances[k]]
    for k in names:
        if k not in _TOLERANCE_KEYS:
            raise ScenarioError(
                f"expected tolerances on {', '.join(_TOLERANCE_KEYS)}, found {k!r}",
                source=sc.source,
            )
    worst: dict = {}
    for signs in itertools.product((-1.0, 1.0), repeat=len(names)):
        changes = {
            k: sc.get(k) * (1 + sgn * tolerances[k]) for k, sgn in zip(names, signs, strict=True)
        }
        corner = _corner(sc, changes)
        p = loop_plant(corner, loop, sample_time_s=sample_time_s)
        f = analyse(
            _loop_tf(p, g.kp, g.ki, g.kd, model, disc, tf_s),
            prefilter=_prefilter(prefilter, p.sample_time_s, model),
        )
        for name, lower_is_worse in (
            ("phase_margin_deg", True),
            ("gain_margin_dB", True),
            ("delay_margin_s", True),
            ("ms", False),
            ("mt", False),
            ("overshoot_percent", False),
        ):
            v = getattr(f, name)
            cur = worst.get(name)
            if cur is None or (v < cur["value"] if lower_is_worse else v > cur["value"]):
                worst[name] = {
                    "value": float(v),
                    "corner": {k: float(x) for k, x in changes.items()},
                }
        if not f.stable:
            worst["unstable_corner"] = {k: float(x) for k, x in changes.items()}
    return worst


def _corner(sc: Scenario, changes: dict[str, float]) -> Scenario:
    """The scenario at one corner of the tolerances.

    A wound-field machine's ``torque_constant`` is derived from its field and cannot be
    written; its corner value is put into the motor the plants read (the linear plants take
    ``K`` as a parameter, which is what the tolerance spreads).
    """
    k = changes.get("motor.torque_constant")
    if k is None or sc.motor.kind == "permanent_magnet":
        return sc.with_changes(changes)
    import dataclasses

    rest = {name: v for name, v in changes.items() if name != "motor.torque_constant"}
    corner = sc.with_changes(rest)
    return dataclasses.replace(corner, motor=dataclasses.replace(corner.motor, torque_constant=k))


def with_gains(sc: Scenario, result: TuningResult) -> Scenario:
    """The scenario with the tuned gains in its loop table (parallel form)."""
    tbl = getattr(sc.control, result.loop)
    if tbl is None:
        raise ScenarioError(
            f"expected a [control.{result.loop}] table to write the gains into, found none",
            source=sc.source,
            key=f"control.{result.loop}",
        )
    if tbl.form != "parallel":
        raise ScenarioError(
            f"expected the parallel form (kp, ki, kd) in [control.{result.loop}] to write the "
            f"gains into, found form = '{tbl.form}'",
            source=sc.source,
            key=f"control.{result.loop}.form",
        )
    return sc.with_changes(dict(result.scenario_keys))


__all__ = ["METHODS", "TuningResult", "tune", "with_gains"]


def check_in_simulation(sc: Scenario, result: TuningResult, *, step: float | None = None) -> dict:
    """Run the nonlinear simulation of the tuned loop on a reference step; predicted against
    simulated overshoot, rise and settling time.

    The scenario is run in the loop's own control mode (its inner loops as the scenario has
    them), with the tuned gains, no events, and a step reference of ``step`` after ten
    samples (default: a tenth of the stall current ``V/R``, a twentieth of the no-load speed
    ``V/K``, or 1 rad, made smaller where the loop's first output would pass 30 % of its
    limit). The prediction is the linear model's step (without a reference
    prefilter, which the simulation does not have). Where the drive reaches a current or
    voltage limit the two differ, and the result says so.
    """
    import dataclasses

    from dcsim.engine.run import simulate
    from dcsim.scenario.schema import Reference

    loop = result.loop
    if step is None:
        # small enough that the loop's first output, (kp + ki h) step, stays within 30 % of
        # its limit (the bus voltage for the current loop): the linear case
        first = result.kp + result.ki * result.sample_time_s
        tbl = getattr(sc.control, loop)
        limit = {
            "current": sc.supply.voltage,
            "speed": tbl.limit if tbl is not None and tbl.limit else math.inf,
            "position": tbl.limit if tbl is not None and tbl.limit else math.inf,
        }[loop]
        default = {
            "current": 0.1 * sc.supply.voltage / sc.motor.resistance,
            "speed": 0.05 * sc.supply.voltage / sc.motor.torque_constant,
            "position": 1.0,
        }[loop]
        step = min(default, 0.3 * limit / first) if first > 0 else default
    tuned = with_gains(sc, result)
    predicted = result.figures
    if result.prefilter_time_s:
        plant = loop_plant(tuned, loop)
        predicted = analyse(
            _loop_tf(plant, result.kp, result.ki, result.kd, result.model,
                     result.discretisation, 0.0)
        )  # fmt: skip
    t0 = 10 * result.sample_time_s
    horizon = predicted.settling_time_s if math.isfinite(predicted.settling_time_s) else 0.1
    duration = t0 + max(8.0 * horizon, 200 * result.sample_time_s)
    loops = {
        name: dataclasses.replace(getattr(tuned.control, name), initial_output=None)
        for name in ("current", "speed", "position")
        if getattr(tuned.control, name) is not None
    }
    control_ = dataclasses.replace(
        tuned.control,
        mode=loop,
        voltage=0.0,
        reference=Reference(kind="step", value=float(step), at=t0),
        **loops,
    )
    sim = dataclasses.replace(tuned.simulation, duration=duration, record_interval=None, step=None)
    run_sc = dataclasses.replace(tuned, control=control_, simulation=sim, events=()).with_changes(
        {}
    )
    res = simulate(run_sc)
    s = res.summary
    saturated = (s.get("time_in_current_limit_s") or 0.0) > 0 or (
        s.get("time_in_voltage_limit_s") or 0.0
    ) > 0
    nonlinear = []
    if sc.motor.coulomb_friction > 0:
        nonlinear.append("Coulomb friction")
    if sc.load.torque != 0:
        nonlinear.append("a load torque")
    if sc.sensors is not None and (sc.sensors.encoder_lines > 0 or sc.sensors.current_adc_bits > 0):
        nonlinear.append("sensor quantisation")
    if sc.sensors is not None and (sc.sensors.current_noise > 0 or sc.sensors.speed_noise > 0):
        nonlinear.append("measurement noise")
    if saturated:
        note = (
            "the drive reached a current or voltage limit: the linear prediction does not "
            "hold for this step"
        )
    elif nonlinear:
        note = (
            f"the scenario has {', '.join(nonlinear)}, which the linear model leaves out: "
            "expect differences"
        )
    else:
        note = "no limit reached: prediction and simulation should agree"
    out = {
        "step": float(step),
        "predicted": {
            "overshoot_percent": predicted.overshoot_percent,
            "rise_time_s": predicted.rise_time_s,
            "settling_time_s": predicted.settling_time_s,
        },
        "simulated": {
            "overshoot_percent": s.get("overshoot_percent"),
            "rise_time_s": s.get("rise_time_s"),
            "settling_time_s": s.get("settling_time_s"),
        },
        "saturated": bool(saturated),
        "nonlinear": nonlinear,
        "note": note,
    }
    return out
