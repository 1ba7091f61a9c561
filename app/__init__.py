"""Loopwright front ends over :mod:`core`: the command line and the Qt window."""
