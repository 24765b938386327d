"""Index layout of the machine-library kernel (:mod:`dcsim.engine.machine_kernel`).

It reads the common parameter vector of :mod:`dcsim.engine.layout` (with the machine
entries ``P_KIND`` ... ``P_GAP``) and extends the state, the accumulators and the trace.
The first four states and the first eleven trace columns mean what they mean in the ideal
kernel, so controllers, events and result code see the same names.
"""

from dcsim.engine.layout import RECORD_NAMES as _BASE_NAMES

# State vector (the ideal kernel's four, then the machine's own)
X_CURRENT = 0  # armature current [A]
X_SPEED = 1  # motor shaft speed [rad/s]
X_POSITION = 2  # motor shaft angle [rad]
X_BUS = 3  # bus capacitor voltage [V] (unused without a capacitor)
X_FIELD = 4  # shunt / separate field current [A] (series machine: unused, i_f = i_a)
X_LOAD_SPEED = 5  # load-side speed of a compliant shaft [rad/s] (rigid: equals X_SPEED)
X_LOAD_POSITION = 6  # load-side angle [rad] (rigid: equals X_POSITION)
N_MSTATE = 7

# Power integrands, integrated with the state by the same Runge-Kutta stages
W_I2 = 0  # i_a^2 [A^2]
W_SUPPLY = 1  # armature source power V_s i_s [W]
W_SOURCE_LOSS = 2  # R_s i_s^2 [W]
W_COPPER = 3  # armature copper R_a i_a^2 [W]
W_FRICTION = 4  # bearing viscous + Coulomb (without the gear's part) [W]
W_LOAD = 5  # load torque x load-side speed (without the gear's part) [W]
W_BRUSH_FRICTION = 6  # [W]
W_IRON = 7  # hysteresis + eddy-current drag [W]
W_GEAR = 8  # gear loss [W]
W_FIELD_COPPER = 9  # field winding(s) copper loss [W]
W_SHAFT_DAMPING = 10  # loss in the shaft's damping [W]
W_FIELD_SUPPLY = 11  # power from the separate field supply [W]
W_BRUSH_DROP = 12  # brush contact drop 2 V_b |i_a| [W]
N_POWER = 13

# Accumulators: the integrals above, then peaks and counters
M_PEAK_I = N_POWER  # largest |i_a| [A]
M_PEAK_I_TIME = N_POWER + 1  # [s]
M_BUS_MAX = N_POWER + 2  # [V]
M_BUS_MIN = N_POWER + 3  # [V]
M_LOCK = N_POWER + 4  # kinetic energy removed when an event locks a turning rotor [J]
M_COUPLING = N_POWER + 5  # kinetic energy lost when load inertia engages / carried off [J]
M_SUBSTEPS = N_POWER + 6  # Runge-Kutta sub-steps taken
M_PEAK_SPEED = N_POWER + 7  # largest |w| of the motor shaft [rad/s]
M_PEAK_FIELD = N_POWER + 8  # largest |i_f| [A]
N_MACC = N_POWER + 9

# Trace columns: the ideal kernel's, then the machine's
R_FIELD_CURRENT = len(_BASE_NAMES)
R_FLUX_CONSTANT = R_FIELD_CURRENT + 1
R_LOAD_SPEED = R_FIELD_CURRENT + 2
R_LOAD_POSITION = R_FIELD_CURRENT + 3
R_SHAFT_TORQUE = R_FIELD_CURRENT + 4
R_SHAFT_TWIST = R_FIELD_CURRENT + 5
N_MREC = R_FIELD_CURRENT + 6

RECORD_NAMES = _BASE_NAMES + (
    "field_current_A",
    "flux_constant_V_s_rad",  # instantaneous K (flux x commutator ripple), = motor torque / i
    "load_speed_rad_s",
    "load_position_rad",
    "shaft_torque_Nm",
    "shaft_twist_rad",
)
