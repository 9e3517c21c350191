"""The record of finished planes that lets an interrupted cube run resume.

The record is a JSON-lines file in the output folder.  Its first line names the run
(inputs, options, scales, common beam); every later line is one finished plane with
the SHA-256 of the bytes written for it into each output cube.  A plane's line is
appended (and flushed to disk) only after its data are on disk, so a run stopped at
any moment leaves a record whose planes are all complete; a line cut short by the
stop is ignored.  On resume each recorded plane's bytes are hashed again and a plane
whose bytes differ is computed again.
"""

import json
import logging
import os

from skyscale.io.report import plain_json

__all__ = ["RECORD_NAME", "RECORD_VERSION", "RunRecord"]

logger = logging.getLogger(__name__)

#: File name of the record inside the output folder.
RECORD_NAME = "cube-progress.jsonl"

#: Layout version of the record; a record of another version is not resumed.
RECORD_VERSION = 1


def _differences(old, new, prefix=""):
    """Keys whose values differ between two plain dicts, as 'key: old -> new'."""
    out = []
    for key in sorted(set(old) | set(new)):
        a, b = old.get(key), new.get(key)
        if isinstance(a, dict) and isinstance(b, dict):
            out += _differences(a, b, f"{prefix}{key}.")
        elif a != b:
            out.append(f"{prefix}{key}: {a!r} -> {b!r}")
    return out


class RunRecord:
    """Append-only record of one cube run's finished planes.

    Parameters
    ----------
    out_dir : str
        The output folder.
    identity : dict
        What makes two runs the same run: input files, options, scales, beam.
    """

    def __init__(self, out_dir, identity):
        self.path = os.path.join(out_dir, RECORD_NAME)
        self.identity = plain_json(dict(identity, record_version=RECORD_VERSION))
        self.planes = {}
        self._fh = None

    def exists(self):
        return os.path.isfile(self.path)

    def load(self):
        """Read an existing record; return the finished planes ``{index: entry}``.

        Raises
        ------
        ValueError
            If the record belongs to another run (other inputs or options).
        """
        with open(self.path, encoding="utf-8") as fh:
            lines = fh.read().splitlines()
        head = json.loads(lines[0]) if lines else {}
        if head.get("identity") != self.identity:
            diff = _differences(head.get("identity") or {}, self.identity)
            raise ValueError(f"{os.path.dirname(self.path)} holds an unfinished run of other "
                             f"inputs or options ({'; '.join(diff[:3]) or 'unreadable record'}); "
                             "rerun with the same ones to resume, or rerun with "
                             "--overwrite to start again")
        planes = {}
        for n, line in enumerate(lines[1:], start=2):
            try:
                entry = json.loads(line)
            except json.JSONDecodeError:
                logger.warning("record %s line %d is incomplete; ignored", self.path, n)
                continue
            planes[int(entry["plane"])] = entry
        self.planes = planes
        return planes

    def start(self):
        """Write a new record holding only the run's identity."""
        self.planes = {}
        with open(self.path, "w", encoding="utf-8") as fh:
            fh.write(json.dumps({"identity": self.identity}) + "\n")
            fh.flush()
            os.fsync(fh.fileno())

    def add(self, entry):
        """Append one finished plane (a dict with at least ``plane`` and ``status``)."""
        entry = plain_json(entry)
        if self._fh is None:
            self._fh = open(self.path, "a", encoding="utf-8")
        self._fh.write(json.dumps(entry, allow_nan=False) + "\n")
        self._fh.flush()
        os.fsync(self._fh.fileno())
        self.planes[int(entry["plane"])] = entry

    def forget(self, index):
        """Drop a plane from the in-memory view (its bytes failed the check)."""
        self.planes.pop(index, None)

    def close(self):
        if self._fh is not None:
            self._fh.close()
            self._fh = None
