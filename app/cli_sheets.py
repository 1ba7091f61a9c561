"""``loopwright compare`` and ``loopwright export``: gain sets side by side, and the drive sheet.

Registered on the main parser by :func:`add_commands`; no Qt is imported.
"""

from __future__ import annotations

import json

from core.errors import InputError


def cmd_compare(args, out) -> int:
    """Print the gain sets of a preset side by side (text table or JSON)."""
    from app.cli import _load
    from core.safety import CAUTION
    from core.gainsets import compare, comparison_table, comparison_to_json

    preset = _load(args.preset)
    names = None
    if args.sets is not None:
        names = [n.strip() for n in args.sets.split(",")]
        if any(not n for n in names):
            raise InputError("--sets", args.sets, "gain-set names separated by commas, none empty")
    result = compare(preset, names, args.baseline)
    if args.json:
        json.dump({**comparison_to_json(result), "caution": CAUTION}, out, indent=2, allow_nan=False)
        print(file=out)
    else:
        print(comparison_table(result), file=out)
        print(f"\n{CAUTION}", file=out)
    return 0


def cmd_export(args, out) -> int:
    """Write the configuration sheet of one gain set through one export profile."""
    from app.cli import _load
    from core.export import FORMATS, resolve_profile, sheet, write_sheet

    if args.format not in FORMATS:
        raise InputError("--format", args.format, "one of " + ", ".join(FORMATS))
    preset = _load(args.preset)
    profile = resolve_profile(args.profile)
    s = sheet(preset, args.set, profile)
    path = write_sheet(s, args.output, args.format)
    print(f"{s.axis_name}: gain set '{s.gain_set_name}' through profile '{s.profile_name}' written to {path} "
          f"({args.format})", file=out)
    if s.flags:
        print(s.attention, file=out)
        for f in s.flags:
            print(f"  [{f.severity}] {f.loop}: {f.message}", file=out)
    print(f"\n{s.caution}", file=out)
    return 0


def add_commands(subparsers) -> None:
    """Register ``compare`` and ``export`` on the main parser's subparsers."""
    p = subparsers.add_parser("compare", help="gain sets side by side: margins, responses, move, flags")
    p.add_argument("preset", help="preset file or built-in demo name")
    p.add_argument("--sets", help="comma-separated gain-set names (default: all)")
    p.add_argument("--baseline", help="the set differences are taken against (default: the first)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=cmd_compare)
    p = subparsers.add_parser("export", help="write a gain set as a drive configuration sheet")
    p.add_argument("preset", help="preset file or built-in demo name")
    p.add_argument("--set", required=True, help="gain set name")
    p.add_argument("--profile", required=True, help="export profile: a shipped name (si, per_unit, ti_ms_rpm, "
                                                    "per_sample_counts) or a profile file")
    p.add_argument("--format", required=True, choices=("csv", "xlsx", "json", "pdf"))
    p.add_argument("-o", "--output", required=True, help="file to write (atomically)")
    p.set_defaults(func=cmd_export)
