"""The safety caution every hand-over of gains carries (CLI output, exports, reports, window).

One text, one place: front ends and writers import it from here.
"""

CAUTION = (
    "CAUTION: these gains come from a model. Before the axis moves: set reduced torque/current and "
    "speed limits for the first motion, have the emergency stop and the guards in place, verify every gain "
    "on the real axis (low-amplitude step and frequency-response tests), follow the drive maker's manual for "
    "the meaning and units of each parameter, and defer to local codes, machine-safety standards and "
    "licensed practice."
)
"""The one-paragraph caution for command-line output and every exported sheet."""

CAUTION_LONG = (
    "Loopwright computes gains, margins and responses from a model. A model is never the "
    "machine: parameters are uncertain, friction, backlash and resonances differ, and the "
    "drive's own filters and scaling may not match.\n\n"
    "Verify every gain set on the real axis before relying on it: start with reduced torque, "
    "current and speed limits; have guards and a tested emergency stop in place; keep people "
    "clear of moving parts; follow the drive manufacturer's manual and commissioning procedure, "
    "the applicable machine-safety standards and local codes, and work under licensed, "
    "qualified practice.\n\n"
    "The results are an engineering aid, not a safety function and not a certification."
)
"""The fuller caution for the window's first-launch dialog and the About box."""
