"""Index layout of the flat arrays the kernel works on.

The kernel sees no scenario objects: a state vector, a parameter vector and an event table,
all float arrays, indexed by the integer constants below. :mod:`dcsim.engine.assemble` fills
them from a :class:`~dcsim.scenario.schema.Scenario`.
"""

# State vector x
X_CURRENT = 0  # armature current [A]
X_SPEED = 1  # shaft speed [rad/s]
X_POSITION = 2  # shaft angle [rad]
X_BUS = 3  # bus capacitor voltage [V] (unused without a capacitor)
N_STATE = 4

# Parameter vector p (SI)
P_R = 0  # armature resistance [ohm]
P_L = 1  # armature inductance [H]
P_K = 2  # torque / back-EMF constant [N*m/A]
P_J = 3  # total inertia, rotor + load [kg*m^2]
P_B = 4  # viscous friction [N*m*s/rad]
P_TC = 5  # Coulomb friction [N*m] (with a gear: + its Coulomb-like part P_GEAR_COULOMB)
P_TL = 6  # load torque [N*m] (with a gear: its constant part at the motor shaft)
P_LOCK = 7  # 1.0 when the rotor is locked
P_VS = 8  # source open-circuit voltage [V]
P_RS = 9  # source resistance [ohm]
P_C = 10  # bus capacitance [F]
P_REGEN = 11  # 1.0 when the source takes current back
P_VCMD = 12  # commanded armature voltage [V]
P_TS = 13  # static (breakaway) friction [N*m]; 0: equal to P_TC (breakaway = max of both)
P_TBR = 14  # brush friction [N*m] (a Coulomb torque of its own)
P_TH = 15  # hysteresis (iron) drag torque [N*m] (constant magnitude)
P_BE = 16  # eddy-current (iron) drag coefficient [N*m*s/rad]
P_VBRUSH = 17  # brush contact drop per brush [V] (two brushes in the armature circuit)
P_GEAR_COULOMB = 18  # the gear's Coulomb-like part T_gear, included in P_TC [N*m]
P_GEAR_CONST = 19  # the gear's part of P_TL: T_const - T_L / N [N*m]
# machine library (read by dcsim.engine.machine_kernel only; the other kernels ignore them)
P_KIND = 20  # machine kind code, MACHINE_* below
P_RF = 21  # field winding resistance (series machine: the series winding's) [ohm]
P_LF = 22  # field winding inductance (series machine: the series winding's) [H]
P_MAF = 23  # field-armature mutual inductance, back-EMF = M i_f w below saturation [H]
P_VF = 24  # field supply voltage of the separately excited machine [V]
P_RSE = 25  # compound machine: series winding resistance [ohm]
P_LSE = 26  # compound machine: series winding inductance [H]
P_NSE = 27  # compound machine: series ampere-turns per armature amp in field amps, signed [-]
P_WBASE = 28  # base speed above which the field is weakened (0: no weakening) [rad/s]
P_WMAX = 29  # over-speed limit that stops the run (0: none) [rad/s]
P_NSEG = 30  # commutator segments (coils) for the torque ripple (0: smooth) [-]
P_POLES = 31  # pole pairs [-]
P_J1 = 32  # inertia on the motor side of a compliant shaft [kg*m^2]
P_KSH = 33  # shaft stiffness (0: rigid) [N*m/rad]
P_CSH = 34  # shaft damping [N*m*s/rad]
P_GAP = 35  # backlash, total angular play at the motor shaft [rad]
N_PARAM = 36

MACHINE_PM = 0
MACHINE_SEPARATE = 1
MACHINE_SHUNT = 2
MACHINE_SERIES = 3
MACHINE_COMPOUND = 4
MACHINE_CODE = {
    "permanent_magnet": MACHINE_PM,
    "separately_excited": MACHINE_SEPARATE,
    "shunt": MACHINE_SHUNT,
    "series": MACHINE_SERIES,
    "compound": MACHINE_COMPOUND,
}

# Accumulators (integrated at full rate by the kernel)
A_I2T = 0  # integral of i^2 [A^2*s]
A_SUPPLY = 1  # energy delivered by the ideal source [J]
A_SOURCE_LOSS = 2  # loss in the source resistance [J]
A_COPPER = 3  # armature copper loss [J]
A_FRICTION = 4  # viscous + Coulomb friction loss [J]
A_LOAD = 5  # energy to the load torque [J]
A_LOCK = 6  # kinetic energy removed when the rotor is locked by an event [J]
A_PEAK_I = 7  # largest |i| [A]
A_PEAK_I_TIME = 8  # when [s]
A_BUS_MAX = 9  # highest bus voltage [V]
A_BUS_MIN = 10  # lowest bus voltage [V]
A_SPLITS = 11  # number of located regime changes (stick/slip, clipping, diode)
A_COUPLING = 12  # kinetic energy lost when load inertia engages, or carried off when released [J]
A_BRUSH_FRICTION = 13  # brush friction loss [J]
A_IRON = 14  # iron loss: hysteresis + eddy-current drag [J]
A_BRUSH_DROP = 15  # brush contact drop loss 2 V_b |i| [J]
A_GEAR = 16  # gear loss [J]
N_ACC = 17

# Recorded columns (kernel order)
R_TIME = 0
R_CURRENT = 1
R_SPEED = 2
R_POSITION = 3
R_ARMATURE_V = 4
R_BUS_V = 5
R_MOTOR_TORQUE = 6
R_LOAD_TORQUE = 7
R_SUPPLY_CURRENT = 8
R_FRICTION_TORQUE = 9
R_BRIDGE_CURRENT = 10
N_REC = 11

RECORD_NAMES = (
    "time_s",
    "current_A",
    "speed_rad_s",
    "position_rad",
    "armature_voltage_V",
    "bus_voltage_V",
    "motor_torque_Nm",
    "load_torque_Nm",
    "supply_current_A",
    "friction_torque_Nm",
    "bridge_bus_current_A",
)

# Kernel exit status
STATUS_OK = 0
STATUS_NONFINITE = 1
STATUS_REGEN_NO_PATH = 2
STATUS_BUS_NEGATIVE = 3
STATUS_OVERSPEED = 4
