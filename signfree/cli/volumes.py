"""``signfree volumes INPUT INPUT [INPUT ...] --mu SPEC``: Delta f(mu) of
inputs at different volumes on one mu grid, and its infinite-volume limit by
a fit in 1/V, with a figure and an HTML page (the machinery of ``sweep``,
for inputs without labels)."""
import argparse

from signfree.cli.options import (add_analysis_options, add_volume_options, fail,
                                  settings_from_args)
from signfree.cli.sweep import add_execution_options, execute

HELP = "several volumes to the infinite-volume limit of Delta f(mu)"


def add_parser(sub):
    p = sub.add_parser("volumes", help=HELP)
    p.add_argument("input", nargs="+", help="density files, one per volume")
    p.add_argument("--volumes", type=_volumes, metavar="V1,V2,...",
                   help="the volume of each input in order (default: each file's "
                        "'# volume:' line)")
    add_analysis_options(p)
    add_volume_options(p)
    add_execution_options(p, "signfree-volumes-DATE-TIME")
    p.set_defaults(handler=cmd_volumes)
    return p


def _volumes(text):
    try:
        return [float(v) for v in text.split(",")]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected numbers separated by commas, got {text!r}")


def cmd_volumes(args):
    from signfree.errors import InputError
    from signfree.report.manifest import check_inputs, manifest_of_files
    try:
        settings = settings_from_args(args)
        if len(args.input) < 2:
            raise ValueError("give at least two inputs (one per volume)")
        manifest = manifest_of_files(args.input, args.volumes)
        manifest = check_inputs(manifest, args.kind, args.symmetry, settings.volume)
    except (InputError, ValueError) as exc:
        return fail(str(exc))
    return execute(manifest, args, settings, "signfree-volumes")
