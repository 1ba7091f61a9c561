"""Benchmark of the sampled drive simulation (issue 3).

A 0.2 s move with a load step on a ball-screw axis at a 16 kHz current-loop rate
(3,201 samples). Prints the median of the whole ``simulate_scenario`` call and of
the compiled kernel alone, the same kernel run as plain Python (``py_func``, with
its helpers swapped for their Python versions too) timed in the same run, their
ratio, and the numba compile and cache-load times measured in fresh processes.

Targets: < 2 ms median after warm-up; kernel >= 50x faster than pure Python.

Run: ``python bench/bench_simulate.py`` (from the repository root).
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile

import numpy as np
from timing import median_s  # bench/ is on the path when a benchmark is run as a script

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

from core import sim_kernel as K  # noqa: E402
from core.axis import Axis  # noqa: E402
from core.drive import Drive  # noqa: E402
from core.gains import PI, CurrentGains, GainSet, PositionGains, SpeedGains  # noqa: E402
from core.load import Load  # noqa: E402
from core.motor import Motor  # noqa: E402
from core.scenario import scenario_from_dict  # noqa: E402
from core.simulate import _prepare, simulate_scenario, warm_up  # noqa: E402

SCENARIO = {"name": "bench move", "kind": "move", "profile": "trapezoid", "distance": "50 mm",
            "speed": "0.5 m/s", "acceleration": "5 m/s^2", "load_step": "50 N", "load_step_time": "0.12 s",
            "duration": "0.2 s", "limits": True, "anti_windup": "clamp"}


def bench_axis() -> tuple[Axis, GainSet]:
    """PMSM on a 10 mm-lead ball screw with an 8 kg table and 30 N Coulomb friction."""
    motor = Motor(kind="pmsm", resistance_ohm=0.5, inductance_h=1e-3, torque_constant_nm_per_a=0.45,
                  back_emf_v_s_per_rad=0.3, inertia_kgm2=2e-4, viscous_friction_nm_s_per_rad=1e-4,
                  pole_pairs=4, continuous_current_a=4.0, peak_current_a=12.0, max_speed_rad_s=500.0)
    load = Load(motion="linear", lead_m=0.01, inertia=8.0, coulomb_friction=30.0)
    drive = Drive(bus_voltage_v=325.0, current_limit_a=10.0, pwm_frequency_hz=16000.0, current_rate_hz=16000.0,
                  speed_rate_hz=8000.0, position_rate_hz=4000.0)
    axis = Axis(motor, load, drive, "bench axis")
    wc, ws = 2 * np.pi * 1000.0, 2 * np.pi * 150.0
    kp_w = axis.total_inertia_kgm2 * ws / motor.torque_constant_nm_per_a
    gains = GainSet(CurrentGains(PI(motor.inductance_h * wc, motor.resistance_ohm * wc)),
                    SpeedGains(PI(kp_w, kp_w * ws / 4.0)), PositionGains(30.0, acceleration_ff=1.0))
    return axis, gains




def _fresh_process_times() -> tuple[float, float]:
    """(compile, cache load) of warm_up() in new interpreters sharing an empty cache folder."""
    code = "from core.simulate import warm_up; print(warm_up())"
    root = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        runs = [float(subprocess.run([sys.executable, "-c", code], cwd=root, env=env, capture_output=True,
                                     text=True, check=True).stdout.strip().splitlines()[-1]) for _ in range(2)]
    return runs[0], runs[1]


def main() -> int:
    compile_s, cache_s = _fresh_process_times()
    warm_up()
    axis, gains = bench_axis()
    sc = scenario_from_dict(SCENARIO, axis, "bench")
    pr = _prepare(axis, gains, sc)
    out = np.zeros((K.N_CH, pr.n))
    args = (pr.ad, pr.bd, pr.ac, pr.bc, pr.fp, pr.ip, pr.sos_fb, pr.sos_cmd, pr.ref_a, pr.ref_b, pr.ref_c,
            pr.t_load, out)

    full = median_s(lambda: simulate_scenario(axis, gains, SCENARIO), 200)
    kernel = median_s(lambda: K.run_kernel(*args), 200)

    # Pure Python: the same source, interpreted, helpers included.
    helpers = ("_pi_step", "_biquads", "_at_rest")
    saved = {h: getattr(K, h) for h in helpers}
    try:
        for h in helpers:
            setattr(K, h, saved[h].py_func)
        out_py = np.zeros_like(out)
        args_py = args[:-1] + (out_py,)
        python = median_s(lambda: K.run_kernel.py_func(*args_py), 5)
    finally:
        for h in helpers:
            setattr(K, h, saved[h])
    K.run_kernel(*args)
    same = np.allclose(out, out_py, rtol=1e-12, atol=1e-12)

    print(f"scenario: 0.2 s move + load step, {pr.n} samples at {axis.drive.current_rate_hz:g} Hz "
          f"(speed {axis.drive.speed_rate_hz:g} Hz, position {axis.drive.position_rate_hz:g} Hz)")
    print(f"simulate_scenario median   : {full * 1e3:8.3f} ms   (target < 2 ms)")
    print(f"numba kernel median        : {kernel * 1e3:8.3f} ms")
    print(f"pure-Python kernel median  : {python * 1e3:8.3f} ms")
    print(f"ratio python / numba kernel: {python / kernel:8.1f} x   (target >= 50 x)")
    print(f"ratio python / full call   : {python / full:8.1f} x")
    print(f"numba compile (fresh cache): {compile_s:8.3f} s;  cache load: {cache_s:8.3f} s")
    print(f"pure-Python and numba traces identical: {same}")
    ok = full < 2e-3 and python / kernel >= 50 and same
    print("PASS" if ok else "FAIL")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
