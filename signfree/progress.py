"""Where a long computation is: every stage may say what it is doing, and
whoever listens (the command line's progress line) hears it. With no
listener a report costs one test of an empty list.

    from signfree import progress
    progress.report("integrating", done=3, total=40, detail="320 bits")

    with progress.listening(print_it):   # print_it(stage, done, total, detail)
        analyse(...)

This module sits below every stage and imports nothing of signfree.
"""
from contextlib import contextmanager

_listeners = []


def report(stage, done=None, total=None, detail=""):
    """Tell the listeners that the computation is at ``stage`` (a few plain
    words), optionally ``done`` of ``total`` steps and a short ``detail``."""
    if _listeners:
        for listener in list(_listeners):
            listener(stage, done, total, detail)


@contextmanager
def listening(listener):
    """Call ``listener(stage, done, total, detail)`` for every report made
    inside the block."""
    _listeners.append(listener)
    try:
        yield listener
    finally:
        _listeners.remove(listener)
