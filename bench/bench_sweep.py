"""Tolerance sweep and auto-tune timings, against python-control timed in the same run.

Run by hand: ``python bench/bench_sweep.py [PRESET]``. Prints the time of the
vectorised margins of all three loops for 10,000 Monte Carlo variants
(core.sweep.variant_margins), the time per variant of a python-control loop over the
same kind of variants (Pade(5) state-space models from core.loops.control_models,
frequency_response on the same grid and stability_margins on the FRD, as in
bench_analysis.py) -- a few hundred variants are timed and the figure is SCALED to
10,000 -- their ratio, and the time of one auto-tune run. Targets (issue 6): < 1 s,
ratio >= 400, auto-tune < 10 s. The machine is shared: figures are noisy.
"""

from __future__ import annotations

import sys
import time


def main(preset_name: str = "belt_gantry", variants: int = 10_000, reference_variants: int = 200) -> None:
    import control

    from core.autotune import autotune
    from core.flags import targets_from_dict
    from core.loops import control_models
    from core.presets import builtin_preset
    from core.sweep import sweep_grid, variant_factors, variant_margins
    from core.tolerances import factor_dict, tolerances_from_dict, varied_axis

    p = builtin_preset(preset_name)
    axis, gains = p.axis, p.active_gain_set
    tol = tolerances_from_dict(p.tolerances, axis)
    factors = variant_factors(tol, "montecarlo", variants - 1, seed=0)
    variant_margins(axis, gains, factors[:200])                     # warm-up
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        variant_margins(axis, gains, factors)
        times.append(time.perf_counter() - t0)
    ours = min(times)
    omega = sweep_grid(axis, gains.position.kp_per_s, factors)
    t0 = time.perf_counter()
    for row in factors[:reference_variants]:
        models = control_models(varied_axis(axis, factor_dict(row)), gains, pade_order=5)
        for loop in ("current", "speed", "position"):
            response = control.frequency_response(models[loop].open_loop, omega)
            control.stability_margins(control.frd(response.complex, omega))
    per_variant = (time.perf_counter() - t0) / reference_variants
    scaled = per_variant * len(factors)
    print(f"preset {preset_name}: {len(factors)} variants x 3 loops, {len(omega)} grid points, "
          f"varied {', '.join(t.name for t in tol.varied)}")
    print(f"vectorised sweep margins: {ours:.3f} s (best of 3; runs {', '.join(f'{t:.3f}' for t in times)} s)"
          f"  target < 1 s")
    print(f"python-control loop: {per_variant * 1e3:.1f} ms per variant, timed over {reference_variants} variants "
          f"and scaled to {len(factors)}: {scaled:.1f} s")
    print(f"ratio: {scaled / ours:.0f}x  target >= 400x")
    t0 = time.perf_counter()
    result = autotune(axis, gains, tol, targets_from_dict(p.targets))
    print(f"auto-tune ({result.objective}, {result.corners} variants): {time.perf_counter() - t0:.2f} s, "
          f"{result.status}, {result.evaluations} evaluations  target < 10 s")
    print("(2 shared cores: figures are as measured and noisy)")


if __name__ == "__main__":
    main(*sys.argv[1:2])
