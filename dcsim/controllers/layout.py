"""Index layout of the controller's flat arrays (parameters ``cp``, state ``cs``).

The controller runs inside both kernels (:mod:`dcsim.engine.kernel` and
:mod:`dcsim.engine.bridge_kernel`) at every *base sample*, the fastest loop's sample time; the
other loops run every ``ratio`` base samples. :mod:`dcsim.controllers.assemble` fills the
arrays from a :class:`~dcsim.scenario.schema.Scenario`.
"""

# Modes
MODE_VOLTAGE = 0
MODE_CURRENT = 1
MODE_SPEED = 2
MODE_POSITION = 3

# Loops (blocks of parameters and of state)
LOOP_CURRENT = 0
LOOP_SPEED = 1
LOOP_POSITION = 2
N_LOOP = 3

# Per-loop parameters, at cp[LP0 + loop * NLP + offset]
L_KP = 0  # proportional gain [output unit / input unit]
L_KI = 1  # integral gain [output unit / (input unit * s)]
L_KD = 2  # derivative gain [output unit * s / input unit]
L_TF = 3  # derivative filter time constant [s]
L_B = 4  # setpoint weight of the proportional term [-]
L_LIMIT = 5  # output limit [output unit] (inf: none)
L_TT = 6  # back-calculation tracking time [s]
L_AW = 7  # anti-windup: AW_NONE, AW_CLAMP, AW_BACK
L_DISC = 8  # discretisation of the integral: DISC_*
L_RATIO = 9  # sample time in base samples
L_H = 10  # sample time [s]
L_U0 = 11  # initial output [output unit] (bumpless start; nan: the integral starts at 0)
L_ACTIVE = 12  # 1 when the mode runs this loop
L_FF = 13  # feed-forward switch (current: back-EMF; speed: acceleration; position: speed)
L_FF2 = 14  # second feed-forward switch (speed: friction)
L_REGEN = 15  # speed loop: largest current command opposing the measured speed [A] (inf: none)
NLP = 16

AW_NONE = 0
AW_CLAMP = 1
AW_BACK = 2
DISC_BACKWARD = 0
DISC_FORWARD = 1
DISC_TUSTIN = 2

# Global parameters
C_MODE = 0
C_DELAY = 1  # 1: the output of a sample is applied one base sample later
C_H = 2  # base sample time [s]
C_K = 3  # torque constant the feed-forward uses [N*m/A]
C_J = 4  # total inertia the feed-forward uses [kg*m^2]
C_BV = 5  # viscous friction the feed-forward uses [N*m*s/rad]
C_TC = 6  # Coulomb friction the feed-forward uses [N*m]
C_ENC = 7  # encoder counts per revolution (0: no encoder, the angle is read exactly)
C_SPEED_METHOD = 8  # SPEED_*
C_SPEED_TF = 9  # speed low-pass time constant [s] (0: none)
C_TIMER_F = 10  # timer clock stamping encoder edges [Hz] (0: exact)
C_I_GAIN = 11  # current sensor gain error [-] (measured = (1 + g) i + offset)
C_I_OFFSET = 12  # [A]
C_I_BITS = 13  # ADC bits (0: not quantised)
C_I_RANGE = 14  # full scale +-range [A] (0: not clipped)
C_I_NOISE = 15  # white noise standard deviation [A]
C_W_NOISE = 16  # [rad/s]
C_TH_NOISE = 17  # [rad]
C_V_NOISE = 18  # [V]
C_V_BITS = 19  # bus voltage ADC bits (0: not quantised)
C_V_RANGE = 20  # bus voltage ADC full scale, 0..range [V] (0: not clipped)
C_BUS_LIMIT = 21  # 1: the current loop's output is also limited to the measured bus voltage
C_VMAX_FRACTION = 22  # usable fraction of the bus voltage (the modulation limit) [-]
LP0 = 23
N_CP = LP0 + N_LOOP * NLP

SPEED_EXACT = 0
SPEED_DIFFERENCE = 1
SPEED_PERIOD = 2

# Per-loop state, at cs[LS0 + loop * NLS + offset]
S_INT = 0  # integrator [output unit]
S_DER = 1  # derivative term [output unit]
S_YPREV = 2  # measurement at the loop's previous sample
S_EPREV = 3  # error at the previous sample (Tustin)
S_OUT = 4  # output after the limit
S_RAW = 5  # output before the limit
S_STARTED = 6  # 1 after the first sample
S_REF = 7  # reference the loop followed at its last sample
NLS = 8

# Global state and the recorded values (the recorded block is copied to the trace)
G_VOUT = 0  # voltage command applied now [V]
G_VPENDING = 1  # voltage command waiting for the next base sample (computation delay) [V]
G_COUNT = 2  # encoder count at the last sample
G_COUNT_SPEED = 3  # encoder count at the last speed-loop sample
G_EDGE_T = 4  # time of the last encoder edge [s]
G_EDGE_T_PREV = 5  # time of the edge before it [s]
G_EDGE_COUNT = 6  # count at the last edge
G_EDGE_DIR = 7  # direction of the last edge (+-1, 0: none yet)
G_TH_PREV = 8  # true angle at the last speed-loop sample (edge timing) [rad]
G_T_PREV = 9  # time of the last speed-loop sample [s]
G_W_RAW = 10  # speed estimate before the low-pass [rad/s]
G_HINT = 11  # reference segment found last
G_ACC_REF = 12  # reference acceleration handed to the speed loop [rad/s^2]
G_SPEED_FF = 13  # speed feed-forward handed to the speed loop [rad/s]
GREC = 14  # first recorded value
# recorded, in trace order (see RECORD_NAMES)
K_REF = 0  # reference of the outermost loop (value)
K_REF_D1 = 1  # its first derivative
K_REF_D2 = 2  # its second derivative
K_POS_CMD = 3  # position the position loop follows [rad]
K_SPEED_CMD = 4  # speed the speed loop follows [rad/s]
K_CURRENT_CMD = 5  # current the current loop follows [A]
K_VOLTAGE_CMD = 6  # armature voltage command applied [V]
K_I_MEAS = 7  # [A]
K_W_MEAS = 8  # [rad/s]
K_TH_MEAS = 9  # [rad]
K_V_MEAS = 10  # [V]
K_I_INT = 11  # current-loop integrator [V]
K_W_INT = 12  # speed-loop integrator [A]
K_TH_INT = 13  # position-loop integrator [rad/s]
K_CUR_LIMITED = 14  # 1 while the current loop's output is at its limit
K_SPD_LIMITED = 15  # 1 while the speed loop's output (the current command) is at its limit
K_POS_LIMITED = 16  # 1 while the position loop's output (the speed command) is at its limit
N_CREC = 17
LS0 = GREC + N_CREC
N_CS = LS0 + N_LOOP * NLS

RECORD_NAMES = (
    "reference",
    "reference_rate",
    "reference_acceleration",
    "position_command_rad",
    "speed_command_rad_s",
    "current_command_A",
    "voltage_command_V",
    "measured_current_A",
    "measured_speed_rad_s",
    "measured_position_rad",
    "measured_bus_voltage_V",
    "current_integrator_V",
    "speed_integrator_A",
    "position_integrator_rad_s",
    "current_loop_limited",
    "speed_loop_limited",
    "position_loop_limited",
)
"""Trace columns of a closed-loop run, after the kernel's own (values held between samples)."""
