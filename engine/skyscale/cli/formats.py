"""Small helpers the cost commands' tables share: the console, times, memory, scales.

``skyscale plan`` (`cost_commands`) and ``skyscale bench`` (`bench_summary`) both use
them; the words for times and memory are the planner's (`skyscale.cost.planner`),
imported when first needed so that ``skyscale --help`` does not load the cost model.
"""

import sys

__all__ = ["plain_console", "time_text", "memory_text", "scales_text"]


def plain_console():
    """A rich console without highlighting, 150 columns wide when not on a terminal."""
    from rich.console import Console
    return Console(highlight=False, width=None if sys.stdout.isatty() else 150)


def time_text(seconds):
    """A planned time in words (`skyscale.cost.planner.seconds_text`)."""
    from skyscale.cost.planner import seconds_text
    return seconds_text(seconds)


def memory_text(nbytes):
    """A planned memory figure in words (`skyscale.cost.planner.bytes_text`)."""
    from skyscale.cost.planner import bytes_text
    return bytes_text(nbytes)


def scales_text(values):
    """Scales as ``0,4,8.5``."""
    return ",".join(f"{s:g}" for s in values)
