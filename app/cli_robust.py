"""``loopwright sweep``, ``autotune`` and ``notch``: robustness from the command line (no Qt).

Wire into app/cli.py with ``cli_robust.add_commands(sub)`` on the subparsers object and add
:data:`COMMANDS` to the set of headless command names.
"""

from __future__ import annotations

import json
import math
import sys
import time

from core.errors import InputError

COMMANDS = ("sweep", "autotune", "notch")


class ProgressBar:
    """A one-line progress bar on stderr (shown only on a terminal, or when forced)."""

    def __init__(self, label: str, enabled: bool | None = None, stream=None):
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.label, self._last = label, 0.0

    def __call__(self, fraction: float, message: str = "") -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if fraction < 1.0 and now - self._last < 0.1:
            return
        self._last = now
        filled = int(round(30 * max(0.0, min(1.0, fraction))))
        self.stream.write(f"\r{self.label} [{'#' * filled}{'.' * (30 - filled)}] {fraction:4.0%} {message[:40]:40}")
        if fraction >= 1.0:
            self.stream.write("\n")
        self.stream.flush()


def _preset_and_tolerances(args):
    from app.cli import _load
    from core.flags import targets_from_dict
    from core.tolerances import tolerances_from_dict

    preset = _load(args.preset)
    gains = preset.gain_set(args.set) if args.set else preset.active_gain_set
    if gains is None:
        raise InputError("gain_sets", "(none)", "at least one [[gain_sets]] table in the preset")
    tolerances = tolerances_from_dict(preset.tolerances, preset.axis)
    if not tolerances.varied:
        raise InputError("tolerances", preset.tolerances or "(none)", "a [tolerances] table with at least one range")
    return preset, gains, tolerances, targets_from_dict(preset.targets)


def _num(x, unit="", digits=4):
    return "n/a" if x is None or not math.isfinite(x) else f"{x:.{digits}g} {unit}".strip()


def cmd_sweep(args, out) -> int:
    """Sweep the preset's tolerances: worst cases, ranking, flags."""
    from app.cli import print_flags
    from core.safety import CAUTION
    from core.sweep import SweepSettings, sweep, sweep_summary

    preset, gains, tolerances, targets = _preset_and_tolerances(args)
    settings = SweepSettings(mode=args.mode, count=args.count, seed=args.seed, levels=args.levels,
                             inertia_ratio_max=args.inertia_ratio_max)
    result = sweep(preset.axis, gains, tolerances, settings, targets,
                   progress=ProgressBar("sweep", True if args.progress else None))
    if args.json:
        json.dump({"axis": preset.axis.name, "gain_set": gains.name, **sweep_summary(result), "caution": CAUTION},
                  out, indent=2)
        print(file=out)
        return 0
    print(f"{preset.axis.name}: gain set '{gains.name}', {settings.mode} sweep of {result.variant_count} variants "
          f"({', '.join(result.parameters)}) in {result.elapsed_s:.2f} s", file=out)
    units = {"phase_margin_deg": "deg", "gain_margin_db": "dB", "sensitivity_peak": "", "bandwidth_hz": "Hz",
             "delay_margin_s": "s", "overshoot_pct": "%", "speed_dip_rad_s": "rad/s"}
    print(f"{'loop':9} {'metric':18} {'nominal':>12} {'worst':>12}  worst variant", file=out)
    for w in result.worst:
        where = ", ".join(f"{k} x{v:.3g}" for k, v in w.factors.items() if v != 1.0) or "nominal"
        print(f"{w.loop:9} {w.metric:18} {_num(w.nominal, units[w.metric]):>12} {_num(w.value, units[w.metric]):>12}"
              f"  {where}", file=out)
    print("\nwhich tolerance costs the most margin (one at a time):", file=out)
    for r in result.ranking:
        print(f"  {r.parameter:13} x{r.low_factor:.3g}..x{r.high_factor:.3g}: {r.worst_loop} loop loses "
              f"{r.phase_margin_loss_deg[r.worst_loop]:.3g} deg of phase margin", file=out)
    print_flags(result.flags, out, "all variants pass")
    print(f"\n{CAUTION}", file=out)
    return 0


def cmd_autotune(args, out) -> int:
    """Auto-tune against the preset's targets at every tolerance corner."""
    from core.safety import CAUTION
    from core.autotune import autotune, autotune_summary

    preset, gains, tolerances, targets = _preset_and_tolerances(args)
    scenario = None
    if args.scenario:
        names = [s.get("name") for s in preset.scenarios]
        if args.scenario not in names:
            raise InputError("--scenario", args.scenario, "one of the preset's scenarios: " + ", ".join(map(str, names)))
        scenario = preset.scenarios[names.index(args.scenario)]
    gain_ranges, ranges_notes = None, []
    if args.profile:
        from core.autotune import profile_gain_ranges
        from core.export import resolve_profile

        gain_ranges, ranges_notes = profile_gain_ranges(preset, gains, resolve_profile(args.profile))
    ratio = preset.tuning.get("position_separation")
    result = autotune(preset.axis, gains, tolerances, targets, objective=args.objective, at_hz=args.at,
                      scenario=scenario, gain_ranges=gain_ranges,
                      progress=ProgressBar("autotune", True if args.progress else None),
                      speed_to_position_ratio=None if ratio is None else float(ratio))
    if args.json:
        json.dump({"axis": preset.axis.name, "start_gain_set": gains.name, **autotune_summary(result),
                   "gain_ranges": {k: list(v) for k, v in (gain_ranges or {}).items()},
                   "gain_range_notes": ranges_notes, "caution": CAUTION}, out, indent=2)
        print(file=out)
        return 0
    print(f"{preset.axis.name}: auto-tune from '{gains.name}' for {args.objective} over {result.corners} variants: "
          f"{result.status} after {result.evaluations} evaluations, {result.elapsed_s:.2f} s", file=out)
    print(f"  {result.message}", file=out)
    if result.gains is not None:
        g = result.gains
        print(f"  objective {result.objective_value:.4g} (start {result.start_value:.4g})", file=out)
        print(f"  current Kp {g.current.pi.kp:.4g} V/A, Ki {g.current.pi.ki:.4g} V/(A*s); speed Kp "
              f"{g.speed.pi.kp:.4g} A*s/rad, Ki {g.speed.pi.ki:.4g} A/rad; position Kp {g.position.kp_per_s:.4g} 1/s",
              file=out)
        if result.position_kp_choice:
            print(f"  {result.position_kp_choice}", file=out)
        for note in ranges_notes:
            print(f"  gain range: {note}", file=out)
    for c in result.constraints:
        print(f"  {'*' if c.active else ' '} {c.name:28} worst {_num(c.worst, c.unit):>12} limit "
              f"{_num(c.limit, c.unit):>10} slack {c.slack:+.3g}", file=out)
    print(f"\n{CAUTION}", file=out)
    return 0


def cmd_notch(args, out) -> int:
    """Propose a speed-feedback notch or low-pass for the two-mass resonance, with before/after margins."""
    from app.cli import _load
    from core.resonance import propose_filter, proposal_summary
    from core.safety import CAUTION
    from core.tolerances import tolerances_from_dict

    preset = _load(args.preset)
    gains = preset.gain_set(args.set) if args.set else preset.active_gain_set
    if gains is None:
        raise InputError("gain_sets", "(none)", "at least one [[gain_sets]] table in the preset")
    tolerances = tolerances_from_dict(preset.tolerances, preset.axis)
    r = propose_filter(preset.axis, gains, tolerances, kind=args.kind, gm_target_db=args.gm_target)
    if args.json:
        json.dump({"axis": preset.axis.name, "start_gain_set": gains.name, **proposal_summary(r),
                   "caution": CAUTION}, out, indent=2)
        print(file=out)
        return 0
    print(f"{preset.axis.name}: {args.kind} for gain set '{gains.name}' (resonance {preset.axis.resonance_hz:.4g} Hz "
          f"nominal, {min(c['resonance_hz'] for c in r.corners):.4g}..{max(c['resonance_hz'] for c in r.corners):.4g}"
          f" Hz over the tolerances)", file=out)
    if r.kind == "notch":
        for n in r.gains.speed.notches[len(r.gains.speed.notches) - r.added_notches:]:
            print(f"  notch at {n.centre_hz:.4g} Hz, zeta zero {n.zeta_zero:.3g}, zeta pole {n.zeta_pole:.3g}: depth "
                  f"{20 * math.log10(n.zeta_zero / n.zeta_pole):.1f} dB, width ~{2 * n.zeta_pole * n.centre_hz:.3g} Hz",
                  file=out)
    else:
        print(f"  speed-feedback low-pass at {r.centre_hz:.4g} Hz ({r.depth_db:.1f} dB at the resonance)", file=out)
    print(f"  resonance margin (target {r.gm_target_db:g} dB): nominal {r.resonance_margin_before_db:+.1f} -> "
          f"{r.resonance_margin_after_db:+.1f} dB; worst {r.resonance_margin_worst_before_db:+.1f} -> "
          f"{r.resonance_margin_worst_after_db:+.1f} dB", file=out)
    print(f"  {'stiffness':>9} {'inertia':>8} {'fr Hz':>8} {'before dB':>10} {'after dB':>9}", file=out)
    for c in r.corners:
        mark = "" if c["after_db"] >= r.gm_target_db else "  below target"
        print(f"  x{c['stiffness']:<8.3g} x{c['load_inertia']:<7.3g} {c['resonance_hz']:8.4g} {c['before_db']:+10.1f} "
              f"{c['after_db']:+9.1f}{mark}", file=out)
    print(f"  phase cost at the speed crossover ({r.speed_crossover_hz:.4g} Hz): {r.phase_cost_deg:+.1f} deg; speed PM "
          f"{r.phase_margin_before_deg:.1f} -> {r.phase_margin_after_deg:.1f} deg, GM {_num(r.gain_margin_before_db, 'dB')}"
          f" -> {_num(r.gain_margin_after_db, 'dB')}", file=out)
    print("  verified: the target holds at nominal and at every tolerance point" if r.verified else
          "  NOT verified: no filter of this kind meets the target at every tolerance point; the best found is shown",
          file=out)
    print(f"\n{CAUTION}", file=out)
    return 0


def add_commands(subparsers) -> None:
    """Register ``sweep`` and ``autotune`` on an argparse subparsers object."""
    p = subparsers.add_parser("sweep", help="sweep the preset's tolerances: worst-case margins")
    p.add_argument("preset", help="preset file or built-in demo name")
    p.add_argument("--set", help="gain set name (default: the active one)")
    p.add_argument("--mode", choices=("corners", "grid", "montecarlo"), default="corners")
    p.add_argument("--count", type=int, default=1000, help="Monte Carlo variants (default 1000)")
    p.add_argument("--seed", type=int, default=0, help="Monte Carlo seed (default 0)")
    p.add_argument("--levels", type=int, default=3, help="grid values per parameter (default 3)")
    p.add_argument("--inertia-ratio-max", type=float, default=10.0, help="sizing limit, load/rotor (default 10)")
    p.add_argument("--progress", action="store_true", help="show the progress bar even when not on a terminal")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=cmd_sweep)
    p = subparsers.add_parser("autotune", help="maximise an objective with margins at every tolerance corner")
    p.add_argument("preset", help="preset file or built-in demo name")
    p.add_argument("--set", help="starting gain set (default: the active one)")
    p.add_argument("--objective", choices=("speed_bandwidth", "position_gain", "stiffness"), default="speed_bandwidth")
    p.add_argument("--at", type=float, help="frequency of the stiffness objective, Hz")
    p.add_argument("--scenario", help="a preset scenario that must run without current or voltage saturation")
    p.add_argument("--profile", help="export profile (shipped name or file) whose min/max rows bound the gains")
    p.add_argument("--progress", action="store_true", help="show the progress bar even when not on a terminal")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=cmd_autotune)
    p = subparsers.add_parser("notch", help="propose a resonance notch or low-pass and check it at every tolerance")
    p.add_argument("preset", help="preset file or built-in demo name")
    p.add_argument("--set", help="gain set name (default: the active one)")
    p.add_argument("--kind", choices=("notch", "lowpass"), default="notch")
    p.add_argument("--gm-target", type=float, default=6.0, help="gain margin wanted at the resonance, dB (default 6)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=cmd_notch)
