"""The ``coldmargin`` command.

Exit codes: 0 ok, 1 verification failed (records) or internal error, 2 invalid input or usage. Messages
for bad input name the key path, the value and what is allowed.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import traceback
from collections.abc import Sequence

from planner import __version__
from planner.errors import PlannerError

EXIT_OK, EXIT_FAILED, EXIT_INPUT = 0, 1, 2


class _Parser(argparse.ArgumentParser):
    """argparse exits 2 on usage errors, which is our 'bad input or usage' code too."""


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="coldmargin", description="Plan and check cold preservation protocols.")
    parser.add_argument("--version", action="version", version=f"coldmargin {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    p = sub.add_parser("assess", help="assess protocol files and print the margins",
                       description="Assess each protocol file: freezing point, margins, flags, cautions.")
    p.add_argument("files", nargs="+", metavar="FILE", help="protocol YAML files")
    p.add_argument("--json", action="store_true",
                   help="print one JSON object per file (a JSON array for several files)")
    p.set_defaults(handler=_assess)

    c = sub.add_parser("calibrate", help="fit the nucleation rate to your own freezing assay (CSV)",
                       description="Fit the heterogeneous nucleation rate to a freezing-assay CSV (format: "
                                   "docs/calibration-csv.md) and save a calibration file a protocol can name "
                                   "under nucleation.calibration. An existing file is never overwritten.")
    c.add_argument("assay", metavar="ASSAY.csv", help="the freezing-assay CSV")
    c.add_argument("--out", required=True, metavar="FILE.yaml", help="calibration file to write (must not exist)")
    c.set_defaults(handler=_calibrate)

    try:
        from planner import cli_records
    except ImportError:
        cli_records = None
    if cli_records is not None:
        cli_records.add_commands(sub)
    try:
        from planner import serve
    except ImportError:
        serve = None
    if serve is not None:
        a = sub.add_parser("app", help="serve the planner in the browser (voila, 127.0.0.1)",
                           description="Serve the planner notebook with voila on 127.0.0.1.")
        serve.add_app_arguments(a)
        a.set_defaults(handler=serve.run_app)
    return parser


def _assess(args: argparse.Namespace) -> int:
    from planner.assessment import assess
    from planner.protocol import load_protocol

    results = []
    for path in args.files:
        try:
            results.append(assess(load_protocol(path)))
        except PlannerError as exc:
            print(f"coldmargin: {path}: {exc}", file=sys.stderr)
            return EXIT_INPUT
    if args.json:
        dicts = [r.to_dict() for r in results]
        payload = dicts[0] if len(dicts) == 1 else dicts
        print(json.dumps(payload, indent=2, ensure_ascii=False, allow_nan=False))
    else:
        for path, result in zip(args.files, results, strict=True):
            print(summary_text(path, result.to_dict()))
    return EXIT_OK


def _calibrate(args: argparse.Namespace) -> int:
    from planner.calibration import fit_assay, read_assay, save_calibration

    cal = fit_assay(read_assay(args.assay))
    path = save_calibration(cal, args.out)
    lo, hi = cal.measured_supercooling
    print(f"{cal.samples} samples, {cal.frozen} frozen; measured supercooling {lo:.2f} to {hi:.2f} K")
    if cal.kind == "upper-bound":
        print("no sample froze: the calibration is a one-sided 95 % upper bound on the rate, not an estimate")
    else:
        low, high = cal.log_rate_interval(cal.reference_supercooling)
        print(f"rate per volume at {cal.reference_supercooling:.2f} K supercooling: "
              f"{float(cal.rate(cal.reference_supercooling)):.3g} per m3 per s "
              f"(90 % interval {math.exp(low):.3g} to {math.exp(high):.3g})")
    print("observed vs predicted fraction frozen:")
    for row in cal.goodness_of_fit:
        print(f"  {row['kind']:4s} {row['condition']}: n={row['samples']}, observed {row['observed']:.2f}, "
              f"predicted {row['predicted']:.2f}")
    for flag in cal.flags:
        print(f"  [{flag.code}] {flag.message}")
    print(f"saved {path} (name it in a protocol as nucleation: {{calibration: {path.name}}})")
    return EXIT_OK


def summary_text(path: str, a: dict) -> str:
    """A readable summary of one assessment dict."""
    from planner.assessment import STATE_WORDS

    lines = [f"== {a['title']}  ({path})"]
    verdict = a["verdict"]
    lines.append(f"Verdict: {STATE_WORDS.get(verdict['state'], verdict['state']).upper()}")
    lines += [f"  - {r}" for r in verdict["reasons"]]
    skip = {"schema", "title", "margins", "margin_states", "verdict", "flags", "cautions", "software"}
    for name, section in a.items():
        if name in skip or not isinstance(section, dict):
            continue
        lines.append(f"{name}:")
        for key, value in section.items():
            if key in ("flags", "parameters") or isinstance(value, (dict, list)) and len(str(value)) > 100:
                continue
            lines.append(f"  {key}: {_short(value)}")
    lines.append("Margins:")
    for m in a["margin_states"]:
        lines.append(f"  {m['label']}: {_short(m['value'])} {m['unit']} - {STATE_WORDS.get(m['state'], m['state'])}")
    if a["flags"]:
        lines.append("Flags:")
        lines += [f"  [{f['code']}] {f['message']}" for f in a["flags"]]
    lines.append("Cautions:")
    lines += [f"  * {c['title']}: {c['text']} [{c['source']}]" for c in a["cautions"]]
    return "\n".join(lines) + "\n"


def _short(value) -> str:
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.handler(args))
    except PlannerError as exc:
        print(f"coldmargin: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        return EXIT_FAILED
    except Exception:  # an internal error: say so plainly, with the trace for a bug report
        print("coldmargin: internal error (please report it with the lines below)", file=sys.stderr)
        traceback.print_exc()
        return EXIT_FAILED


if __name__ == "__main__":
    sys.exit(main())
