"""The ``loopwright`` command: the window, or headless tune / check / simulate.

No Qt is imported unless the window is asked for, so the headless commands run
on machines without a display (and in CI) at numpy's start-up cost.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
from pathlib import Path

from app import cli_robust, cli_sheets
from core.errors import InputError
from core.safety import CAUTION



def _load(preset: str):
    from core.presets import builtin_names, builtin_preset, load_preset

    if preset in builtin_names():
        return builtin_preset(preset)
    path = Path(preset)
    if not path.exists():
        raise InputError("PRESET", preset, "a preset file or one of the built-in demos: " + ", ".join(builtin_names()))
    return load_preset(path)


def _settings(preset):
    from core.flags import targets_from_dict
    from core.tuning import tuning_from_dict

    return targets_from_dict(preset.targets), tuning_from_dict(preset.tuning)


def _fmt(value: float, unit: str, digits: int = 4) -> str:
    if value is None or not math.isfinite(value):
        return "none" if value is None or math.isinf(value) else "n/a"
    return f"{value:.{digits}g} {unit}".strip()


def _gain_rows(gains) -> list[tuple[str, str]]:
    return [
        ("current Kp", _fmt(gains.current.pi.kp, "V/A")),
        ("current Ki", _fmt(gains.current.pi.ki, "V/(A*s)")),
        ("back-EMF decoupling", "on" if gains.current.decouple_back_emf else "off"),
        ("speed Kp", _fmt(gains.speed.pi.kp, "A*s/rad")),
        ("speed Ki", _fmt(gains.speed.pi.ki, "A/rad")),
        ("speed feedback low-pass", _fmt(gains.speed.feedback_lowpass_hz, "Hz") if gains.speed.feedback_lowpass_hz else "off"),
        ("position Kp", _fmt(gains.position.kp_per_s, "1/s")),
        ("velocity feedforward", f"{gains.position.velocity_ff:.0%}"),
        ("acceleration feedforward", f"{gains.position.acceleration_ff:.0%}"),
    ]


def print_flags(flags, out, when_none: str) -> None:
    """Flags as "[severity] loop: message" lines, or ``when_none`` when there are none."""
    if not flags:
        print(when_none, file=out)
        return
    print("flags:", file=out)
    for f in flags:
        print(f"  [{f.severity}] {f.loop}: {f.message}", file=out)


def _print_check(result, out) -> None:
    print(f"{'loop':9} {'crossover':>11} {'PM':>9} {'GM':>9} {'Ms':>6} {'bandwidth':>11} {'overshoot':>10}  stable",
          file=out)
    for loop in ("current", "speed", "position"):
        m, st = result.margins[loop], result.steps[loop]
        print(f"{loop:9} {_fmt(m.crossover_hz, 'Hz'):>11} {_fmt(m.phase_margin_deg, 'deg', 3):>9} "
              f"{_fmt(m.gain_margin_db, 'dB', 3):>9} {m.sensitivity_peak:6.2f} {_fmt(m.bandwidth_hz, 'Hz'):>11} "
              f"{_fmt(st.overshoot_pct, '%', 3):>10}  {'yes' if m.stable else 'NO'}", file=out)
    ls = result.load_step
    print(f"load step {ls.load_torque_nm:.3g} N*m at the motor: speed dip {_fmt(ls.speed_dip_rad_s, 'rad/s')}, "
          f"position error {_fmt(ls.position_error_rad, 'rad')}, recovery {_fmt(ls.recovery_time_s, 's')}", file=out)
    print_flags(result.flags, out, "all checks pass")


def cmd_check(args, out) -> int:
    """Analyse the preset's gain set: margins, responses, flags."""
    from core.analysis import analyse, analysis_summary, axis_summary

    preset = _load(args.preset)
    targets, _ = _settings(preset)
    gains = preset.gain_set(args.set) if args.set else preset.active_gain_set
    if gains is None:
        raise InputError("gain_sets", "(none)", "at least one [[gain_sets]] table in the preset")
    result = analyse(preset.axis, gains, targets, preset.constants_check)
    if args.json:
        doc = {"axis": preset.axis.name, "axis_derived": axis_summary(preset.axis, preset.constants_check),
               "gain_set": gains.name, **analysis_summary(result), "caution": CAUTION}
        json.dump(doc, out, indent=2)
        print(file=out)
    else:
        print(f"{preset.axis.name}: gain set '{gains.name}'", file=out)
        _print_check(result, out)
        print(f"\n{CAUTION}", file=out)
    return 0


def cmd_tune(args, out) -> int:
    """Propose gains from the preset's tuning rules and check them."""
    from core.analysis import analyse, analysis_summary, axis_summary
    from core.export import gain_set_to_dict
    from core.tuning import propose_gains

    preset = _load(args.preset)
    targets, tuning = _settings(preset)
    gains, proposals = propose_gains(preset.axis, tuning, preset.active_gain_set, name="proposed")
    result = analyse(preset.axis, gains, targets, preset.constants_check)
    if args.json:
        doc = {"axis": preset.axis.name, "axis_derived": axis_summary(preset.axis, preset.constants_check),
               "gains": gain_set_to_dict(gains),
               "rationale": {p.loop: {"rule": p.rule, "text": p.rationale,
                                      "expected_crossover_hz": p.expected_crossover_hz} for p in proposals},
               **analysis_summary(result), "caution": CAUTION}
        json.dump(doc, out, indent=2)
        print(file=out)
        return 0
    a = preset.axis
    print(f"{a.name}: tau_e {a.electrical_time_constant_s * 1e3:.3g} ms, tau_m {a.mechanical_time_constant_s * 1e3:.3g} ms, "
          f"DC speed gain {a.dc_speed_gain_rad_s_per_v:.4g} rad/s per V, inertia ratio {a.inertia_ratio:.3g}:1, "
          f"voltage limit {a.drive.voltage_limit_v:.4g} V, current limit {a.current_limit_a:.4g} A", file=out)
    if a.load.compliant:
        print(f"  two-mass load: anti-resonance {a.antiresonance_hz:.4g} Hz, resonance {a.resonance_hz:.4g} Hz", file=out)
    if not preset.constants_check.consistent:
        print(f"  Kt and Ke disagree by {preset.constants_check.relative_difference:+.1%} after conversion", file=out)
    print("\nproposed gains:", file=out)
    for label, value in _gain_rows(gains):
        print(f"  {label:26} {value}", file=out)
    print("\nwhy:", file=out)
    for p in proposals:
        print(f"  {p.loop}: {p.rationale}", file=out)
    print(file=out)
    _print_check(result, out)
    print(f"\n{CAUTION}", file=out)
    return 0


def cmd_simulate(args, out) -> int:
    """Run a stored time-simulation scenario."""
    from core import simulate

    preset = _load(args.preset)
    names = [s.get("name") for s in preset.scenarios]
    if args.scenario not in names:
        raise InputError("--scenario", args.scenario, "one of the preset's scenarios: " + (", ".join(map(str, names)) or "(none)"))
    index = names.index(args.scenario)
    gains = preset.gain_set(args.set or preset.scenarios[index].get("gain_set") or preset.active)
    result = simulate.simulate_preset_scenario(preset, gains, index)
    if args.csv:
        simulate.write_csv(result, args.csv)
    doc = simulate.result_to_json(result)
    if args.json:
        json.dump({"axis": preset.axis.name, "gain_set": gains.name, "scenario": args.scenario, **doc,
                   "caution": CAUTION}, out, indent=2)
        print(file=out)
    else:
        print(f"{preset.axis.name}: scenario '{args.scenario}' with gain set '{gains.name}'", file=out)
        for key, value in doc.get("metrics", {}).items():
            shown = f"{value:.4g}" if isinstance(value, float) else ("n/a" if value is None else value)
            print(f"  {key:34} {shown}", file=out)
        flags = doc.get("flags", [])
        if flags:
            print("flags:", file=out)
            for f in flags:
                print(f"  [{f['severity']}] {f['loop']}: {f['message']}", file=out)
        else:
            print("no limit was reached", file=out)
        if args.csv:
            print(f"traces written to {args.csv}", file=out)
    return 0


def build_parser() -> argparse.ArgumentParser:
    """The argument parser (also documents the commands)."""
    parser = argparse.ArgumentParser(
        prog="loopwright", description="Servo-axis loop tuning workbench. 'loopwright [PRESET]' opens the window "
                                       "(on the built-in demo without PRESET).")
    sub = parser.add_subparsers(dest="command", required=True)
    for name, func, text in (("check", cmd_check, "analyse a preset's gains"),
                             ("tune", cmd_tune, "propose gains from the preset's tuning rules")):
        p = sub.add_parser(name, help=text)
        p.add_argument("preset", help="preset file or built-in demo name")
        p.add_argument("--set", help="gain set name (default: the active one)")
        p.add_argument("--json", action="store_true", help="machine-readable output")
        p.set_defaults(func=func)
    p = sub.add_parser("simulate", help="simulate a stored scenario in time")
    p.add_argument("preset")
    p.add_argument("--scenario", required=True, help="scenario name from the preset")
    p.add_argument("--set", help="gain set name (default: the one the scenario names, else the active one)")
    p.add_argument("--json", action="store_true")
    p.add_argument("--csv", help="write the traces to this CSV file")
    p.set_defaults(func=cmd_simulate)
    cli_sheets.add_commands(sub)
    cli_robust.add_commands(sub)
    return parser


def main(argv: list[str] | None = None, out=None) -> int:
    """Entry point; returns the exit code (0 ok, 2 bad input)."""
    out = out or sys.stdout
    argv = sys.argv[1:] if argv is None else argv
    commands = {"check", "tune", "simulate", "compare", "export", *cli_robust.COMMANDS}
    if not argv or (argv[0] not in commands and not argv[0].startswith("-")):
        from app.window import run

        return run(argv[0] if argv else None)
    args = build_parser().parse_args(argv)
    try:
        return args.func(args, out)
    except InputError as exc:
        print(f"loopwright: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        # The reader (e.g. `| head`) went away: not an error of ours.
        sys.stdout = open(os.devnull, "w")
        return 0


if __name__ == "__main__":
    sys.exit(main())
