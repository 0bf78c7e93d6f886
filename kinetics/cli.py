"""The ``kinetics`` command.  The library computes; this module parses, calls and prints.

Each sub-command has an ``_add_<name>`` (its arguments) and a ``_cmd_<name>`` (its work).
``--json`` prints exactly one JSON object on stdout and nothing else there; messages go
to stderr.  Errors the user can fix (``KineticsError``) print one line and exit 2.
"""

from __future__ import annotations

import argparse
import logging
import sys
from pathlib import Path

from kinetics import __version__
from kinetics.errors import KineticsError
from kinetics.jsonio import dumps


def _print_json(obj) -> None:
    sys.stdout.write(dumps(obj) + "\n")


# ---------------------------------------------------------------- inspect (spectra)
def _add_inspect(sub) -> None:
    p = sub.add_parser("inspect", help="header, axis and peaks of one spectrum")
    p.add_argument("file", type=Path)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_cmd_inspect)


def _cmd_inspect(args) -> int:
    from kinetics.spectra.inspect import inspect_file

    info = inspect_file(args.file)
    if args.json:
        _print_json(info)
        return 0
    print(f"file        {args.file}")
    print(f"format      {info['format']}")
    print(f"kind        {info.get('kind', 'spectrum')}")
    print(f"nucleus     {info['nucleus']}")
    print(f"observe     {info['observe_mhz']:.4f} MHz")
    print(f"points      {info['points']}")
    if info.get("ppm_range"):
        print(f"ppm range   {info['ppm_range'][0]:.3f} .. {info['ppm_range'][1]:.3f}")
    print(f"acquired    {info['acquired'] or 'unknown'}")
    if info.get("peaks"):
        print("peaks       ppm        height        snr")
        for peak in info["peaks"]:
            print(f"            {peak['ppm']:8.3f}  {peak['height']:12.4g}  {peak['snr']:8.1f}")
    return 0


# ---------------------------------------------------------------- commands registry
_ADDERS = [_add_inspect]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="kinetics",
        description="NMR spectra recorded during a reaction -> concentrations, rate "
        "constants with intervals, activation parameters.",
    )
    parser.add_argument("--version", action="version", version=f"kinetics {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress to stderr")
    sub = parser.add_subparsers(dest="command", required=True)
    for add in _ADDERS:
        add(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(
        level=logging.INFO if args.verbose else logging.WARNING,
        format="%(levelname)s %(name)s: %(message)s",
        stream=sys.stderr,
    )
    try:
        return int(args.func(args) or 0)
    except KineticsError as error:
        print(f"kinetics {args.command}: error: {error}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
