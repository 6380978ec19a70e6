"""The ``normalise`` command."""

from __future__ import annotations

import argparse
import json
import sys

from .decode import parse_decode_option
from .errors import NormaliseError
from .literal import DEFAULT_MAX_CELL_CHARS, DEFAULT_MAX_DEPTH, Limits


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("files", nargs="+", metavar="FILE", help="CSV, TSV or JSON Lines exports")
    p.add_argument("--decode", action="append", default=[], metavar="COLUMN=FORMAT",
                   help="fix a column's format: json, python-literal, delimited[:SEP] or text")
    p.add_argument("--encoding", help="text encoding of the files (default UTF-8, with or without BOM)")
    p.add_argument("--delimiter", help="field delimiter of CSV/TSV files (default: detected)")
    p.add_argument("--max-depth", type=int, default=DEFAULT_MAX_DEPTH,
                   help=f"deepest nesting a cell may have (default {DEFAULT_MAX_DEPTH})")
    p.add_argument("--max-cell-chars", type=int, default=DEFAULT_MAX_CELL_CHARS,
                   help=f"longest cell in characters (default {DEFAULT_MAX_CELL_CHARS:,})")


def _limits(args) -> Limits:
    return Limits(max_depth=args.max_depth, max_cell_chars=args.max_cell_chars)


def _formats(args) -> dict:
    out = {}
    for spec in args.decode:
        column, fmt, sep = parse_decode_option(spec)
        out[column] = (fmt, sep)
    return out


def _delimiter(args):
    if args.delimiter in ("\\t", "tab"):
        return "\t"
    return args.delimiter


def cmd_survey(args) -> int:
    from .survey import render, survey

    result = survey(args.files, limits=_limits(args), formats=_formats(args),
                    encoding=args.encoding, delimiter=_delimiter(args))
    if args.json:
        json.dump(result, sys.stdout, indent=2, ensure_ascii=False, default=str)
        sys.stdout.write("\n")
    else:
        print(render(result))
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="normalise",
                                     description="Turn flat exports with nested cells into a linked relational database.")
    sub = parser.add_subparsers(dest="command", required=True)
    p = sub.add_parser("survey", help="report what each column of the exports holds")
    _common(p)
    p.add_argument("--json", action="store_true", help="print the survey as JSON")
    p.set_defaults(func=cmd_survey)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except NormaliseError as exc:
        print(f"normalise: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into a pager or head that closed early
        sys.stderr.close()
        return 0
    except KeyboardInterrupt:
        print("normalise: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
