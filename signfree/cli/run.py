"""``signfree run INPUT [INPUT ...] --mu SPEC ...``: analyse density files and
write results.csv and summary.json per input (several inputs in parallel
processes with --jobs)."""
import sys
import threading
import time
from pathlib import Path

from signfree.cli.options import add_analysis_options, fail, settings_from_args
from signfree.report.outputs import analyse_file, report_text

HELP = "analyse density files"


def add_parser(sub):
    run = sub.add_parser("run", help=HELP)
    run.add_argument("input", nargs="+",
                     help="CSV file(s) (kind slopes, log_density or histogram)")
    add_analysis_options(run)
    run.add_argument("--out", metavar="DIR", help="output folder (default: a new folder); "
                     "with several inputs one subfolder per input")
    run.add_argument("--jobs", type=int, default=1, metavar="N",
                     help="analyse several inputs in N parallel processes")
    run.add_argument("--quiet", action="store_true", help="no progress display")
    run.add_argument("--plots", action="store_true",
                     help="also write the figures (fig_*.png and fig_*.pdf)")
    run.set_defaults(handler=cmd_run)
    return run


def run_files(input_path, args, reference=None):
    """Read, analyse and prepare the files of one run from parsed options;
    raises InputError or ValueError on bad input before anything is written."""
    settings = settings_from_args(args)
    return analyse_file(input_path, args.mu, settings, kind=args.kind, volume=args.volume,
                        symmetry=args.symmetry)


def _analyse_one(job):
    """Worker for one input (also in a child process): (path, report text,
    files) or (path, None, error message); only plain text crosses the
    process boundary."""
    from signfree.errors import InputError
    path, args = job
    try:
        result, files = run_files(path, args)
    except (InputError, ValueError) as exc:
        return path, None, str(exc)
    if getattr(args, "plots", False):
        from signfree.report.figures import figures_files, write_figures
        from signfree.report.observables import observable_figures
        files.update(figures_files(result))
        files.update(write_figures(observable_figures(result)))
    return path, report_text(result), files


class Progress:
    """Elapsed time and files done on stderr, shown only on a terminal and
    only once a run has taken more than two seconds."""

    def __init__(self, total, quiet=False):
        self.total, self.done, self.start = total, 0, time.time()
        self.active = not quiet and sys.stderr.isatty()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)
        if self.active:
            self._thread.start()

    def _loop(self):
        while not self._stop.wait(0.5):
            elapsed = time.time() - self.start
            if elapsed > 2:
                width = 24
                fill = int(width * self.done / self.total)
                sys.stderr.write(f"\rsignfree [{'#' * fill}{'.' * (width - fill)}] "
                                 f"{self.done}/{self.total} files, {elapsed:.0f} s")
                sys.stderr.flush()

    def step(self):
        self.done += 1

    def close(self):
        if self.active:
            self._stop.set()
            self._thread.join()
            if time.time() - self.start > 2:
                sys.stderr.write("\r" + " " * 60 + "\r")


def cmd_run(args):
    from signfree.io.writing import new_folder_name, write_files
    if args.jobs < 1:
        return fail(f"--jobs {args.jobs}: expected at least 1")
    jobs = [(path, args) for path in args.input]
    progress = Progress(len(jobs), args.quiet)
    outcomes = []
    try:
        if args.jobs > 1 and len(jobs) > 1:
            import multiprocessing
            with multiprocessing.get_context("spawn").Pool(min(args.jobs, len(jobs))) as pool:
                for outcome in pool.imap(_analyse_one, jobs):
                    outcomes.append(outcome)
                    progress.step()
        else:
            for job in jobs:
                outcomes.append(_analyse_one(job))
                progress.step()
    finally:
        progress.close()
    failed = [message for _, result, message in outcomes if result is None]
    if failed:
        for message in failed:
            fail(message)
        return 2
    if len(outcomes) == 1:
        targets = [Path(args.out) if args.out else new_folder_name()]
    else:
        base = Path(args.out) if args.out else new_folder_name()
        base.mkdir(parents=True, exist_ok=True)
        stems = [Path(p).stem for p in args.input]
        names = [s if stems.count(s) == 1 else f"{s}-{i + 1}" for i, s in enumerate(stems)]
        targets = [base / name for name in names]
    for (path, text, files), target in zip(outcomes, targets):
        folder = write_files(target, files)
        sys.stdout.write(text)
        print(f"wrote {folder / 'results.csv'} and {folder / 'summary.json'}")
        if len(outcomes) > 1:
            print()
    return 0

