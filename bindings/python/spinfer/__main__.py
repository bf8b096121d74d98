"""``python3 -m spinfer report``: the HTML report from files (also run by ``spinfer report``).

    python3 -m spinfer report MODEL.json --check CHECK.json [--scan SCAN.json]
                              [--truth TRUE_MODEL.json] [--significance EDGES.csv] --out REPORT.html

Exit codes follow the command line's: 0 ok, 2 usage, 65 bad input, 66 file errors.
"""
from __future__ import annotations

import argparse
import json
import sys


def _load_json(path, what):
    try:
        with open(path) as f:
            return json.load(f)
    except OSError as e:
        raise OSError(f"{path}: cannot read the {what} file ({e.strerror})") from None
    except json.JSONDecodeError as e:
        raise ValueError(f"{path}: not a JSON {what} file ({e})") from None


def report_main(argv) -> int:
    import os

    from . import load_model, write_report

    ap = argparse.ArgumentParser(prog="spinfer report",
                                 description="Write one self-contained HTML report of a fitted model.",
                                 epilog="Example:\n  spinfer report model.json --check check.json --out report.html",
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("model", help="model file (.json)")
    ap.add_argument("--check", help="CHECK.json from `spinfer check`")
    ap.add_argument("--scan", help="SCAN.json from `spinfer scan`")
    ap.add_argument("--truth", help="a model file with the true network (synthetic data)")
    ap.add_argument("--title", default=None)
    ap.add_argument("--out", "-o", required=True)
    ap.add_argument("--force", action="store_true", help="overwrite an existing report")
    args = ap.parse_args(argv)
    if os.path.exists(args.out) and not args.force:
        print(f"spinfer: error: {args.out}: file exists (use --force to overwrite)", file=sys.stderr)
        return 66
    try:
        model = load_model(args.model)
        check = _load_json(args.check, "check") if args.check else None
        scan = _load_json(args.scan, "scan") if args.scan else None
        if scan is not None:
            scan = dict(scan, peak=scan.get("peak_temperature"))
        truth = None
        if args.truth:
            t = load_model(args.truth)
            if t.n_units != model.n_units:
                raise ValueError(f"{args.truth}: {t.n_units} units but the model has {model.n_units}")
            truth = t.to_convention(model.convention).couplings
        if check is not None:
            check = dict(check)
            check["summary"] = {name: s for name, s in check.get("summary", {}).items()}
        write_report(args.out, title=args.title or f"spinfer report: {os.path.basename(args.model)}",
                     model=model, check=check, scan=scan, truth=truth)
    except ValueError as e:
        print(f"spinfer: error: {e}", file=sys.stderr)
        return 65
    except OSError as e:
        print(f"spinfer: error: {e}", file=sys.stderr)
        return 66
    print(json.dumps({"command": "report", "output": args.out}))
    print(f"spinfer: report -> {args.out}", file=sys.stderr)
    return 0


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if not argv or argv[0] != "report":
        print("usage: python3 -m spinfer report MODEL.json --check CHECK.json --out REPORT.html",
              file=sys.stderr)
        return 2
    try:
        return report_main(argv[1:])
    except SystemExit as e:  # argparse usage errors
        return 2 if e.code not in (0, None) else 0


if __name__ == "__main__":
    sys.exit(main())
