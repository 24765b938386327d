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
Q_TC = 5  # Coulomb friction [N*m] (with a gear: + its Coulomb-like part Q_GEAR_COULOMB)
Q_TL = 6  # load torque [N*m] (with a gear: its constant part at the motor shaft)
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
Q_DECAY = 50  # 1: drive/decay PWM (one diagonal drives, the off-time decays), 0: Q_UNIPOLAR
Q_SLOW_HIGH = 51  # 1: slow decay on the high-side switches, 0: low-side
Q_FAST_SYNC = 52  # 1: fast decay through the opposite diagonal, 0: through the diodes
Q_FAST_FRAC = 53  # fraction of an off-time in fast decay (then slow) [-]
Q_CHOP_FIXED = 54  # 1: fixed-off-time regulation, 0: cycle-by-cycle
Q_TOFF = 55  # fixed off-time [s]
Q_TCD = 56  # comparator delay [s]
Q_TONMIN = 57  # minimum on-time after a pulse starts [s]
Q_SENSE_BUS = 58  # 1: the sense resistor sees the bus current g i (low/high side), 0: i
Q_RSENSE = 59  # sense resistance [ohm]
Q_OCP = 60  # over-current trip level of the sensed current [A] (0: none)
Q_OCP_DG = 61  # deglitch time [s]
Q_OCP_RETRY = 62  # 1: retry after Q_OCP_RT, 0: latch
Q_OCP_RT = 63  # retry time [s]
Q_TS = 64  # static (breakaway) friction [N*m]; 0: equal to Q_TC (breakaway = max of both)
Q_BAT_R = 65  # battery internal resistance alone [ohm] (part of Q_RS)
Q_BMS_ICHG = 66  # battery disconnect: largest charge current [A] (inf: no limit)
Q_BMS_IDIS = 67  # ... largest discharge current [A] (inf: no limit)
Q_BMS_VFULL = 68  # ... largest terminal voltage OCV - R_bat i [V] (inf: no limit)
Q_BMS_VRECLOSE = 69  # ... recloses when the bus falls below this voltage [V] (-inf: not)
Q_BMS_TRECLOSE = 70  # ... recloses this long after opening [s] (inf: not)
Q_TR = 71  # switch turn-on transition time (rise time) [s] (0: no transition-time loss)
Q_TF = 72  # switch turn-off transition time (fall time) [s]
Q_VBRUSH = 73  # brush contact drop per brush [V] (two brushes in the armature circuit)
Q_TBR = 74  # brush friction [N*m] (a Coulomb torque of its own)
Q_TH = 75  # hysteresis (iron) drag torque [N*m] (constant magnitude)
Q_BE = 76  # eddy-current (iron) drag coefficient [N*m*s/rad]
Q_GEAR_COULOMB = 77  # the gear's Coulomb-like part T_gear, included in Q_TC [N*m]
Q_GEAR_CONST = 78  # the gear's part of Q_TL: T_const - T_L / N [N*m]
N_Q = 79

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
M_CHOP = 11  # current comparator: 0 idle, 1 tripped (decay pending), 2 decaying
M_OCP = 12  # over-current: 0 below, +-1 above (deglitch running, sign of the sensed current),
#             2 tripped
M_BMS = 13  # battery disconnect open: the supply line is open until it recloses
N_M = 14

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
A_CHOP_AT = 28  # time of the comparator's next action (decay start or end) [s]
A_FORCE_START = 29  # the comparator's decay window: start, end of its fast part, end [s]
A_FORCE_FAST = 30
A_FORCE_END = 31
A_PULSE_T0 = 32  # when the present drive pulse started [s]
A_OCP_SINCE = 33  # when the sensed current rose above the over-current level [s]
A_SENSE = 34  # energy in the current-sense resistor [J]
A_ICAP2 = 35  # integral of the capacitor current squared [A^2*s]
A_BUS_MIN_TIME = 36  # when the bus voltage was lowest [s]
A_MARK_ICAP2 = 37  # A_ICAP2 at the start of the present period [A^2*s]
A_CAP_RMS_PERIOD = 38  # largest RMS capacitor current over one period [A]
A_PERIOD_BUS_MAX = 39  # bus voltage extremes within the present period [V]
A_PERIOD_BUS_MIN = 40
A_BUS_RIPPLE = 41  # largest peak-to-peak bus voltage over one period [V]
A_BMS_OPEN_TIME = 42  # when the battery disconnect last opened [s] (-1: never)
A_SWITCH_LOSS = 43  # the switching part of A_BRIDGE [J]
A_RIPPLE_LAST = 44  # current peak-to-peak over the last complete PWM period [A] (-1: none)
A_BRUSH_DROP = 45  # brush contact drop loss 2 V_b |i| [J]
A_BRUSH_FRICTION = 46  # brush friction loss [J]
A_IRON = 47  # iron loss: hysteresis + eddy-current drag [J]
A_GEAR = 48  # gear loss [J]
N_ACC = 49

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
R_SENSED = 20
R_BATTERY_CONNECTED = 21
N_REC = 22

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
    "sensed_current_A",
    "battery_connected",
)
"""The core kernel's columns (same order, same meaning), then the power stage's."""

# Trip log kinds
TRIP_OVER_VOLTAGE = 1
TRIP_UNDER_VOLTAGE = 2
TRIP_RESTART = 3
TRIP_FUSE = 4
TRIP_BYPASS = 5
TRIP_BUS_COLLAPSE = 6
TRIP_OVER_CURRENT = 7
TRIP_BMS_CHARGE = 8  # battery disconnect opened: charge current above its limit
TRIP_BMS_VOLTAGE = 9  # ... terminal voltage above the full-charge voltage
TRIP_BMS_DISCHARGE = 10  # ... discharge current above its limit
TRIP_BMS_RECLOSE = 11  # ... reclosed
MAX_TRIPS = 256
MAX_CHOPS = 100_000  # rows of the comparator's log: decay start, current there, end, current

# Special event indices (negative: actions rather than parameters)
EV_SOURCE_VOLTAGE = -1  # set the source voltage state [V] (and the slope to 0)
EV_SOURCE_RAMP = -2  # set the source voltage state; the slope comes with EV_SLOPE
EV_BYPASS = -3  # bypass the pre-charge resistor now

# Kernel exit status
STATUS_OK = 0
STATUS_NONFINITE = 1
STATUS_BATTERY_EMPTY = 3
