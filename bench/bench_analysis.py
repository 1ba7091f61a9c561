"""One full recompute against a straightforward python-control implementation.

Run by hand: ``python bench/bench_analysis.py [PRESET]``. Prints the median time of
``core.analysis.analyse`` (three loops' frequency responses and margins with exact
delays, four time responses, dynamic stiffness, flags) and of the same outputs
computed with python-control on Pade models of the same loops (frequency_response,
stability_margins (on the FRD) and step_response on each loop, plus the load step), measured in
the same run, and their ratio. Targets (issue 2): ratio >= 30, median < 2 ms.
"""

from __future__ import annotations

import sys
from dataclasses import replace

import numpy as np
from timing import median_s  # bench/ is on the path when a benchmark is run as a script




def main(preset_name: str = "belt_gantry") -> None:
    import control

    from core.analysis import analyse
    from core.flags import targets_from_dict
    from core.loops import CascadeModel, ControlAlgebra
    from core.margins import frequency_grid
    from core.presets import builtin_preset

    preset = builtin_preset(preset_name)
    axis, gains = preset.axis, preset.active_gain_set
    targets = targets_from_dict(preset.targets)
    analyse(axis, gains, targets)                      # warm caches (pint, imports)
    # As a slider on the current-loop Kp would: every call a new gain, so nothing the
    # core caches per loop (the current step) is reused.
    variants = [replace(gains, current=replace(gains.current, pi=replace(gains.current.pi, kp=gains.current.pi.kp
                                                                          * (1 + 1e-3 * k))))
                for k in range(200)]
    calls = iter(range(10 ** 9))
    ours = median_s(lambda: analyse(axis, variants[next(calls) % len(variants)], targets,
                                     preset.constants_check), 200)

    omega = frequency_grid(axis, gains)
    result = analyse(axis, gains, targets)

    def reference():
        model = CascadeModel(axis, gains, ControlAlgebra(5))
        for loop in ("current", "speed", "position"):
            ol = getattr(model, f"{loop}_open")
            cl = getattr(model, f"{loop}_closed")
            response = control.frequency_response(ol, omega)
            # A Pade state-space model this size overflows python-control's polynomial
            # route to margins; its frequency-response (FRD) route is the usable one.
            control.stability_margins(control.frd(response.complex, omega))
            t = result.steps[loop].time_s
            control.step_response(cl, T=t)
            np.max(np.abs(1.0 / (1.0 + ol(1j * omega))))    # Ms on the grid
        control.step_response(model.position_disturbance_speed, T=result.load_step.time_s)

    reference()
    theirs = median_s(reference, 5)
    print(f"preset {preset_name}: {len(omega)} frequencies, {len(result.steps['speed'].time_s)} samples per response")
    print(f"core.analysis.analyse      median {ours * 1e3:8.3f} ms")
    print(f"python-control reference   median {theirs * 1e3:8.3f} ms")
    print(f"ratio {theirs / ours:.1f}x  (targets: >= 30x, core median < 2 ms)")


if __name__ == "__main__":
    main(*sys.argv[1:])
