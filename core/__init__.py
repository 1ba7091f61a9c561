"""Loopwright numerical core: servo-axis models, cascaded loops, tuning rules, analysis.

Pure numerics in SI units. This package never imports Qt, pyqtgraph or ``app``.
"""

__version__ = "0.1.0"
