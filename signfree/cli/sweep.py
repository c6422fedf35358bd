"""``signfree sweep MANIFEST --mu SPEC ...``: every ensemble of a manifest on
local processes (--jobs) or a Dask cluster (--scheduler), one folder per
ensemble, combined tables keyed by the labels, and the infinite-volume limit
of every group of ensembles that differ only in their volume. A re-run with
the same --out resumes."""
import sys
from pathlib import Path

from signfree.cli.options import (add_analysis_options, add_volume_options, fail,
                                  settings_from_args)

HELP = "many ensembles from a manifest, with combined tables and infinite-volume limits"


def add_parser(sub):
    p = sub.add_parser("sweep", help=HELP)
    p.add_argument("manifest", help="CSV with a 'file' column, optional 'volume', 'kind', "
                   "'symmetry', and any label columns (e.g. beta)")
    add_analysis_options(p)
    add_volume_options(p)
    add_execution_options(p, "signfree-sweep-DATE-TIME")
    p.set_defaults(handler=cmd_sweep)
    return p


def add_execution_options(p, default_out):
    """Where the work runs and where its files go (sweep and volumes)."""
    p.add_argument("--out", metavar="DIR", help=f"output folder (default: a new folder "
                   f"{default_out}); give an existing sweep's folder to resume it")
    p.add_argument("--jobs", type=int, metavar="N",
                   help="local processes (default: one per core)")
    p.add_argument("--scheduler", metavar="ADDRESS|FILE",
                   help="run on a Dask cluster: its scheduler address (tcp://host:8786) or "
                        "scheduler file (needs signfree[cluster])")
    p.add_argument("--plots", action="store_true",
                   help="also write the figures of every ensemble")
    p.add_argument("--quiet", action="store_true", help="no progress display")


def cmd_sweep(args):
    from signfree.errors import InputError
    from signfree.report.manifest import read_manifest
    try:
        settings = settings_from_args(args)
        manifest = read_manifest(args.manifest)
    except (InputError, ValueError) as exc:
        return fail(str(exc))
    return execute(manifest, args, settings, "signfree-sweep")


def execute(manifest, args, settings, prefix):
    """Run a sweep from parsed options and print what it did. Exit status 0;
    1 when an ensemble failed (recorded, the others are complete); 2 on bad
    input, nothing written; 130 when interrupted (complete ensembles kept)."""
    from signfree.errors import InputError
    from signfree.io.writing import new_folder_name
    from signfree.report.sweep import SweepInterrupted, default_jobs, run_sweep
    out = Path(args.out) if args.out else new_folder_name(prefix)
    jobs = args.jobs if args.jobs is not None else default_jobs()
    try:
        result = run_sweep(manifest, args.mu, out, settings, kind=args.kind,
                           symmetry=args.symmetry, plots=args.plots, jobs=jobs,
                           scheduler=args.scheduler,
                           progress=None if args.quiet else sys.stderr)
    except (InputError, ValueError) as exc:
        return fail(str(exc))
    except KeyboardInterrupt as exc:
        done = f"{exc.done} of {exc.total} ensembles are" if isinstance(
            exc, SweepInterrupted) else "the finished ensembles are"
        sys.stderr.write(f"\nsignfree: interrupted; {done} complete in {out}. Run the same "
                         f"command with --out {out} to resume.\n")
        return 130
    print_summary(result)
    return 1 if result.failed else 0


def print_summary(result, out=None):
    from signfree.report.collect import table_text
    out = sys.stdout if out is None else out
    outcomes = list(result.outcomes.values())
    earlier = outcomes.count("skipped")
    text = (f"{len(outcomes)} ensembles: {outcomes.count('done') + earlier} complete"
            + (f" ({earlier} from an earlier run)" if earlier else "")
            + f", {outcomes.count('failed')} failed")
    print(text, file=out)
    for name, why in result.failures.items():
        print(f"failed: {name}: {why}", file=out)
    labels = result.manifest.label_names
    for group, limit in result.limits.items():
        title = ", ".join(f"{k} = {v}" for k, v in zip(labels, group))
        vols = ", ".join(f"{v:g}" for v in limit.volumes)
        print(f"\ninfinite-volume limit{' (' + title + ')' if title else ''} from V = {vols}:",
              file=out)
        recs = limit.records()
        print(table_text(recs, ["mu", "delta_f", "total_err", "order", "chi2", "dof",
                                "status"]), end="", file=out)
        h = limit.horizon()
        print("limit ok up to mu = %g" % h if h is not None else
              "no mu has an ok limit", file=out)
    for group, note in result.notes.items():
        print(note, file=out)
    print(f"wrote {result.out}: {', '.join(result.files)} and ensembles/", file=out)
