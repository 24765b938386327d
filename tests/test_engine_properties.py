"""Property test of the engine: for random drives within physical ranges, every run either
finishes with a closed energy account and finite, consistent traces, or stops with the
project's own error -- never another exception.

Source: conservation of energy (the account of the scenario contract). The ranges are
common practice (no source): small brushed motors to a few kilowatts, supplies 5-60 V.
"""

from __future__ import annotations

import math

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import dcsim

CLOSURE = 1e-6  # the project's accuracy target for the account (see tests/reference.py)


def _log_uniform(lo: float, hi: float):
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda e: 10.0**e)


drives = st.fixed_dictionaries(
    {
        "R": _log_uniform(0.05, 20.0),
        "L": _log_uniform(2e-6, 50e-3),
        "K": _log_uniform(0.005, 0.5),
        "J": _log_uniform(1e-6, 1e-2),
        "B": st.one_of(st.just(0.0), _log_uniform(1e-7, 1e-3)),
        "Tc": st.one_of(st.just(0.0), _log_uniform(1e-4, 0.1)),
        "TL": st.floats(-0.2, 0.2),
        "Vs": st.floats(5.0, 60.0),
        "Rs": st.one_of(st.just(0.0), _log_uniform(0.01, 1.0)),
        "C": st.one_of(st.just(0.0), _log_uniform(100e-6, 20e-3)),
        "regen": st.booleans(),
        # command as a fraction of the supply (beyond 1: clips); at least 5 %, so that the run
        # moves energy and the account's relative closure means something
        "cmd": st.floats(0.05, 1.2).flatmap(lambda c: st.sampled_from((c, -c))),
        "step_at": st.floats(0.1, 0.9),
        "new_TL": st.floats(-0.2, 0.2),
    }
)


def _text(d: dict) -> str:
    rs = d["Rs"] if d["C"] == 0.0 else max(d["Rs"], 0.01)
    return f"""
[about]
title = "random drive"
[simulation]
duration = "20 ms"
record_interval = "100 us"
[motor]
resistance = {d["R"]!r}
inductance = {d["L"]!r}
torque_constant = {d["K"]!r}
inertia = {d["J"]!r}
viscous_friction = {d["B"]!r}
coulomb_friction = {d["Tc"]!r}
[load]
torque = {d["TL"]!r}
[supply]
voltage = {d["Vs"]!r}
resistance = {rs!r}
capacitance = {d["C"]!r}
regenerative = {"true" if d["regen"] else "false"}
[control]
voltage = {d["cmd"] * d["Vs"]!r}
[[events]]
at = {d["step_at"] * 0.02!r}
set = {{ "load.torque" = {d["new_TL"]!r} }}
"""


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(drives)
def test_random_drives_close_their_energy_account(d):
    sc = dcsim.load_scenario_text(_text(d), source="<random drive>")
    try:
        res = dcsim.simulate(sc)
    except dcsim.DcsimError:
        return  # refused or stopped with a message: allowed (e.g. regeneration, no capacitor)
    s, tr = res.summary, res.trace
    largest = max(abs(s[k]) for k in s if k.endswith("_J") and "residual" not in k)
    residual = abs(s["energy_balance_residual_J"])
    assert residual <= CLOSURE * largest, (residual, largest, d)
    for name in tr:
        assert np.all(np.isfinite(tr[name])), name
    assert tr["time_s"][-1] == sc.simulation.duration
    if not d["regen"]:
        assert np.all(tr["supply_current_A"] >= 0.0)  # a diode front end never takes current
    # the bridge never applies more than the bus gives
    assert np.all(np.abs(tr["armature_voltage_V"]) <= tr["bus_voltage_V"] * (1 + 1e-9) + 1e-9)
