"""Parameter identification: a permanent-magnet DC motor fitted to a measured log.

:func:`read_log_csv` reads the log (time, voltage, current, speed or position, units in the
header), :func:`fit_motor` fits ``R, L, K, J, B, T_c`` with 95 % confidence intervals
(equation error for the start, output error by least squares), :func:`plot_fit` draws the
measured against the fitted response. ``dcsim fit LOG.csv`` does all three and writes the
fitted ``[motor]`` table.
"""

from dcsim.identify.fit import PARAMETERS, UNITS, FitResult, fit_motor, simulate_log
from dcsim.identify.log import MotorLog, read_log_csv
from dcsim.identify.plot import plot_fit, save_fit_plot

__all__ = [
    "PARAMETERS",
    "UNITS",
    "FitResult",
    "MotorLog",
    "fit_motor",
    "plot_fit",
    "read_log_csv",
    "save_fit_plot",
    "simulate_log",
]
