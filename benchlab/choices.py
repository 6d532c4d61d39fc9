"""Named choices and defaults shared by the command line and the modules behind it.

The CLI builds its parser (and prints ``--help``) from these without importing numpy, scipy,
matplotlib or the simulator; the modules that act on the values import them from here, so
each choice is written once.
"""

from __future__ import annotations

MODEL_NAMES = ("linear", "square", "theta", "ekv")
MODEL_CHOICES = ("auto",) + MODEL_NAMES
DEFAULT_CC_CURRENT = 250e-6  # A, the constant-current threshold criterion
SERIES_NAMES = ("E3", "E6", "E12", "E24", "E48", "E96", "E192")  # IEC 60063
PART_STATES = ("in_stock", "reserved", "used", "rejected")
POLARITIES = ("N", "P")
CURRENT_FROM = ("meter", "resistor")
# the simulated bench
SIM_BAG_SIZE = 40
SIM_FIRST_PORT = 5025  # raw SCPI socket port (common practice)
SIM_SERIES_RESISTOR_OHM = 47.0  # E12; 30 V supply, ~3 V part -> about 0.55 A at most
SIM_TIME_SCALE = 0.0  # real seconds per instrument second: 0 = no waiting, 1 = real time
DEFAULT_SESSIONS_DIR = "sessions"  # where sweep and bag put their sessions
