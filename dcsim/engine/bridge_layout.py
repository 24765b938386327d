"""Index layout of the arrays of the power-stage kernel (:mod:`dcsim.engine.bridge_kernel`).

The averaged and switching bridge models run in their own kernel, whose state also holds the
DC-bus circuit (source inductor current, source voltage of a supply profile, battery state of
charge). Every array is flat and indexed by the constants below; :mod:`dcsim.engine.assemble`
fills them.
"""

from dcsim.engine import layout

# State vector (N_S); the propagators act on the augmented vector [x, 1] (N_A)
S_I = 0  # armature current [A]
S_W = 1  # shaft speed [rad/s]
S_TH = 2  # shaft angle [rad]
S_VC = 3  # bus capacitor voltage (behind its ESR) [V]
S_IS = 4  # source inductor current [A] (held at 0 without supply inductance)
S_VS = 5  # source open-circuit voltage [V] (ramps of a supply profile)
S_SOC = 6  # battery state of charge [-] (1 = full)
N_S = 7
S_ONE = 7  # the constant 1 of the augmented vector
N_A = 8

# Parameters (SI)
Q_R = 0  # armature resistance [ohm]
Q_L = 1  # armature inductance [H]
Q_K = 2  # torque constant [N*m/A]
Q_J = 3  # total inertia [kg*m^2]
Q_B = 4  # viscous friction [N*m*s/rad]
Q_TC = 5  # Coulomb friction [N*m]
Q_TL = 6  # load torque [N*m]
Q_LOCK = 7  # 1 when the rotor is locked
Q_RS = 8  # source + wiring (+ battery internal) resistance [ohm]
Q_LS = 9  # source inductance [H]
Q_C = 10  # bus capacitance [F]
Q_ESR = 11  # capacitor series resistance [ohm]
Q_REGEN = 12  # 1 when the source takes current back
Q_SLOPE = 13  # rate of change of the source voltage [V/s] (supply profile ramps)
Q_BAT = 14  # 1 with a battery source
Q_BAT_A = 15  # open-circuit voltage of the present table segment: OCV = A + B * SOC [V]
Q_BAT_B = 16  # [V]
Q_BAT_Q = 17  # capacity [C]
Q_BAT_LO = 18  # state of charge at the ends of the present segment [-]
Q_BAT_HI = 19
Q_RON = 20  # switch on-resistance [ohm]
Q_VD = 21  # freewheeling diode forward drop [V]
Q_TD = 22  # dead time [s]
Q_FS = 23  # PWM frequency [Hz]
Q_UNIPOLAR = 24  # 1 unipolar, 0 bipolar
Q_EDGE = 25  # 1 edge-aligned carrier, 0 centre-aligned
Q_COUNTS = 26  # timer counts per period (0: duty not quantised)
Q_MINPULSE = 27  # shortest pulse the modulator produces [s]
Q_SWITCHING = 28  # 1 switching model, 0 averaged
Q_VCMD = 29  # commanded armature voltage [V]
Q_VNOM = 30  # nominal supply voltage the duty is computed against [V]
Q_MOD = 31  # modulation in use (mean armature voltage / bus voltage) [-]
Q_ESW = 32  # switching energy per leg transition [J]
Q_ESW_V = 33  # ... at this bus voltage [V] (0: not scaled)
Q_ESW_I = 34  # ... and this current [A] (0: not scaled)
Q_IPK = 35  # cycle-by-cycle peak current limit [A] (0: none)
Q_BLANK = 36  # comparator blanking time after each pulse starts [s]
Q_BRAKE_R = 37  # brake resistor [ohm] (0: no chopper)
Q_BRAKE_ON = 38  # chopper switch-on bus voltage [V]
Q_BRAKE_OFF = 39  # chopper switch-off bus voltage [V]
Q_OV = 40  # over-voltage trip level [V] (0: none)
Q_UV = 41  # under-voltage trip level [V] (0: none)
Q_AUTO_RESTART = 42  # 1 auto-restart, 0 latched
Q_RESTART_DELAY = 43  # [s]
Q_RESTART_MARGIN = 44  # the bus must be this far inside the trip levels to restart [V]
Q_PRE_R = 45  # pre-charge resistor [ohm] (0: none)
Q_PRE_V = 46  # bypass when the bus reaches this voltage [V] (inf: by time only)
Q_FUSE = 47  # 1 with a fuse in the supply line
Q_FUSE_IMIN = 48  # minimum melting current [A]
Q_FUSE_TAU = 49  # heating time constant [s]
Q_TR = 50  # switch turn-on transition time (rise time) [s] (0: no transition-time loss)
Q_TF = 51  # switch turn-off transition time (fall time) [s]
N_Q = 52

# Discrete modes (int64)
M_STUCK = 0  # shaft held at zero speed
M_FSIGN = 1  # direction of sliding Coulomb friction (-1, 0, +1)
M_SIGMA = 2  # current direction the bridge conducts for (-1, +1), 0 = held at zero
M_LEG_A = 3  # leg states, LEG_*
M_LEG_B = 4
M_OPEN = 5  # source diode blocking
M_MELTED = 6  # fuse melted: the supply line is open for good
M_BRAKE = 7  # brake chopper on
M_PRE = 8  # pre-charge resistor in circuit (bridge disabled)
M_TRIP = 9  # tripped (bridge disabled)
M_SEG = 10  # battery table segment
M_LIMITED = 11  # pulse ended by the peak current limit for the rest of the period
N_M = 12

LEG_OFF = 0  # both switches of the leg off (its diodes conduct, or nothing)
LEG_LOW = 1
LEG_HIGH = 2
LEG_AVG = 3  # averaged model: the pair of legs as one cycle-average source

# Accumulators
A_I2T = 0
A_SUPPLY = 1
A_SOURCE_LOSS = 2
A_COPPER = 3
A_FRICTION = 4
A_LOAD = 5
A_LOCK = 6
A_COUPLING = 7
A_BRIDGE = 8
A_BRAKE = 9
A_ESR = 10
A_PRECHARGE = 11
A_FUSE_ARC = 12
A_PEAK_I = 13
A_PEAK_I_TIME = 14
A_BUS_MAX = 15
A_BUS_MIN = 16
A_SPLITS = 17
A_FUSE_HEAT = 18  # present heat fraction of the fuse (1 = melting)
A_FUSE_PEAK = 19
A_FUSE_MELT_TIME = 20  # -1 while intact
A_BRAKE_PEAK_W = 21
A_LIMIT_EVENTS = 22
A_SWITCHINGS = 23
A_TRIP_TIME = 24  # time of the last trip [s]
A_BYPASS_TIME = 25  # when the pre-charge resistor was bypassed [s] (-1: not yet)
A_CACHE_MISSES = 26
A_PERIODS = 27
A_SWITCH_LOSS = 28  # the switching part of A_BRIDGE [J]
A_RIPPLE_LAST = 29  # current peak-to-peak over the last complete PWM period [A] (-1: none)
N_ACC = 30

# Trace columns
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
R_DUTY = 11
R_BRIDGE_STATE = 12
R_CAP_CURRENT = 13
R_BRAKE_CURRENT = 14
R_SOURCE_V = 15
R_FUSE_HEAT = 16
R_SOC = 17
R_LIMIT = 18
R_ENABLED = 19
N_REC = 20

RECORD_NAMES = layout.RECORD_NAMES + (
    "duty",
    "bridge_state",
    "capacitor_current_A",
    "brake_current_A",
    "source_voltage_V",
    "fuse_heat_fraction",
    "state_of_charge",
    "current_limit_active",
    "bridge_enabled",
)
"""The core kernel's columns (same order, same meaning), then the power stage's."""

# Trip log kinds
TRIP_OVER_VOLTAGE = 1
TRIP_UNDER_VOLTAGE = 2
TRIP_RESTART = 3
TRIP_FUSE = 4
TRIP_BYPASS = 5
TRIP_BUS_COLLAPSE = 6
MAX_TRIPS = 256

# Special event indices (negative: actions rather than parameters)
EV_SOURCE_VOLTAGE = -1  # set the source voltage state [V] (and the slope to 0)
EV_SOURCE_RAMP = -2  # set the source voltage state; the slope comes with EV_SLOPE
EV_BYPASS = -3  # bypass the pre-charge resistor now

# Kernel exit status
STATUS_OK = 0
STATUS_NONFINITE = 1
STATUS_BATTERY_EMPTY = 3
