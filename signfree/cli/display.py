"""The progress line on a terminal: elapsed time, files done, and the stage
and position the analysis reports through :mod:`signfree.progress`. Shown on
stderr only when stderr is a terminal, and only once a run has taken more
than two seconds; cleared when the run ends."""
import sys
import threading
import time

from signfree import progress

DELAY = 2.0       # seconds before the line first appears
PERIOD = 0.5      # seconds between redraws


class ProgressLine:
    """``with ProgressLine(files=3, quiet=args.quiet) as line: ...;
    line.file_done()``."""

    def __init__(self, files=1, quiet=False, stream=None):
        self.stream = stream if stream is not None else sys.stderr
        self.files, self.done = files, 0
        self.start = time.monotonic()
        self.state = ("reading", None, None, "")
        self.width = 0
        isatty = getattr(self.stream, "isatty", lambda: False)
        self.active = not quiet and isatty()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)
        self._listen = None

    def hear(self, stage, done=None, total=None, detail=""):
        self.state = (stage, done, total, detail)

    def file_done(self):
        self.done += 1

    def text(self):
        """The line as it would be drawn now."""
        stage, done, total, detail = self.state
        parts = [f"signfree {time.monotonic() - self.start:.0f} s"]
        if self.files > 1:
            parts.append(f"{self.done}/{self.files} files")
        where = stage
        if total:
            where += f" {done}/{total}"
        if detail:
            where += f" ({detail})"
        parts.append(where)
        return " | ".join(parts)

    def _loop(self):
        while not self._stop.wait(PERIOD):
            if time.monotonic() - self.start > DELAY:
                line = self.text()[:119]
                pad = max(0, self.width - len(line))
                self.width = len(line)
                self.stream.write("\r" + line + " " * pad)
                self.stream.flush()

    def __enter__(self):
        if self.active:
            self._listen = progress.listening(self.hear)
            self._listen.__enter__()
            self._thread.start()
        return self

    def __exit__(self, *exc):
        if self.active:
            self._stop.set()
            self._thread.join()
            self._listen.__exit__(None, None, None)
            if self.width:
                self.stream.write("\r" + " " * self.width + "\r")
                self.stream.flush()
        return False
