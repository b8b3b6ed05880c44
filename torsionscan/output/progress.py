"""Progress of a batch on the terminal: one line per finished compound with its answer (s-cis share,
barrier, quality flags) or its failure, and on a terminal a redrawn bar with the time left."""

import logging
import sys
import time

from ..errors import InputError
from ..records import ScanResult
from .report import outcome_line

log = logging.getLogger(__name__)


def _clock(seconds):
    seconds = int(round(seconds))
    return f"{seconds // 3600}:{seconds // 60 % 60:02d}:{seconds % 60:02d}"


class BatchProgress:
    """Counts finished compounds of one batch invocation and shows them with an estimated time left."""

    def __init__(self, stream=None, width=28):
        self.to_compute = 0
        self.stream = stream or sys.stderr
        self.width = width
        self.interactive = self.stream.isatty()
        self.finished = 0
        self.failed = 0
        self.flagged = []  # (name, [(bond label, flag)]) of the compounds finished with a quality flag
        self.started = time.monotonic()

    def _status(self):
        elapsed = time.monotonic() - self.started
        left = self.to_compute - self.finished
        eta = _clock(elapsed / self.finished * left) if self.finished else "?"
        return (f"{self.finished}/{self.to_compute} computed, {self.failed} failed, "
                f"elapsed {_clock(elapsed)}, left ~{eta}")

    def start(self, to_compute, already_done):
        """Begin: to_compute compounds queued, already_done finished earlier in the same folder."""
        self.to_compute = to_compute
        self.started = time.monotonic()
        skipped = f" ({already_done} already finished in this folder)" if already_done else ""
        self._say(f"{self.to_compute} compound(s) to compute{skipped}")
        if self.interactive:
            self._draw()

    def _draw(self):
        filled = self.width * self.finished // max(self.to_compute, 1)
        bar = "#" * filled + "-" * (self.width - filled)
        self.stream.write(f"\r[{bar}] {self._status()}\x1b[K")
        self.stream.flush()

    def _say(self, line):
        if self.interactive:
            self.stream.write("\r\x1b[K")
        self.stream.write(line + "\n")
        self.stream.flush()

    def update(self, outcome):
        """Count one outcome (batch.scan_compound) and show it."""
        self.finished += 1
        failed = outcome["status"] != "done"
        self.failed += failed
        seconds = outcome.get("wall_time_s")
        took = f" in {seconds:.1f} s" if seconds is not None else ""
        if failed:
            self._say(f"{outcome['name']}: FAILED{took}: {outcome['reason']}")
        else:
            line = self._result_line(outcome)
            self._say(line if self.interactive else f"{line}; {self._status()}")
        if self.interactive:
            self._draw()

    def _result_line(self, outcome):
        """The one-line answer of a done outcome; "done" alone when its result cannot be read."""
        seconds = outcome.get("wall_time_s")
        try:
            result = ScanResult.from_dict(outcome["result"])
        except (InputError, KeyError, TypeError) as error:
            log.debug("no result line for %s: %s", outcome.get("name"), error)
            return f"{outcome['name']}: done" + (f" in {seconds:.1f} s" if seconds is not None else "")
        flags = [(bond.label, flag) for bond in result.bonds for flag in bond.flags if flag != "symmetric rotor"]
        if flags:
            self.flagged.append((outcome["name"], flags))
        return outcome_line(outcome["name"], result, seconds)

    def note(self, text):
        """Show one line about the run (a worker replaced, say) without counting a compound."""
        self._say(text)
        if self.interactive:
            self._draw()

    def close(self):
        if self.interactive:
            self.stream.write("\n")
            self.stream.flush()
