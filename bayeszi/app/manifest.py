"""The manifest of a strata run: which strata are done, failed or skipped, and why.

``manifest.json`` sits in the run's output folder. It is rewritten (to a temporary name,
then renamed, so it is never half-written) each time a stratum finishes, fails or is
skipped, so after a crash or a Ctrl-C it still says which stratum folders are complete.
Each entry is keyed by the stratum's name and holds the stratum's key (a hash of its rows
and of the study, :mod:`bayeszi.app.strata`): ``--resume`` skips a stratum whose entry is
``done`` with the same key and whose folder is complete.

Example
-------
>>> import tempfile, os
>>> path = os.path.join(tempfile.mkdtemp(), MANIFEST_NAME)
>>> m = Manifest(path, "study-key")
>>> m.record("a", {"key": "k1", "status": DONE, "folder": "strata/a"})
>>> Manifest.read(path, "study-key").entries["a"]["status"]
'done'
"""

from __future__ import annotations

import json
import os
import tempfile
from typing import Any

from bayeszi.base.errors import BayesziError

MANIFEST_NAME = "manifest.json"
FORMAT = "bayeszi strata manifest 1"
DONE, FAILED, SKIPPED = "done", "failed", "skipped"


class Manifest:
    """The entries of one strata run, by stratum name, written after every change."""

    def __init__(self, path: str, study_key: str,
                 entries: dict[str, dict[str, Any]] | None = None) -> None:
        self.path = path
        self.study_key = study_key
        self.entries: dict[str, dict[str, Any]] = dict(entries or {})

    @classmethod
    def read(cls, path: str, study_key: str) -> Manifest:
        """The manifest at ``path`` (an empty one when there is none)."""
        if not os.path.exists(path):
            return cls(path, study_key)
        try:
            with open(path, encoding="utf-8") as fh:
                raw = json.load(fh)
        except (OSError, ValueError) as err:
            raise BayesziError(f"cannot read the strata manifest {path!r} ({err}); remove it "
                               "to start the run afresh") from None
        if not isinstance(raw, dict) or raw.get("format") != FORMAT:
            raise BayesziError(f"{path!r} is not a bayeszi strata manifest; remove it or "
                               "choose another --out")
        return cls(path, study_key, raw.get("strata", {}))

    def finished(self, name: str, key: str, folder: str) -> bool:
        """Whether stratum ``name`` is done with this ``key`` and its folder is complete."""
        entry = self.entries.get(name, {})
        return (entry.get("status") == DONE and entry.get("key") == key
                and folder_complete(folder))

    def record(self, name: str, entry: dict[str, Any]) -> None:
        """Set the entry of stratum ``name`` and write the manifest."""
        self.entries[name] = dict(entry)
        self.write()

    def write(self) -> None:
        """Write the manifest to a temporary file beside it, then rename it into place."""
        data = {"format": FORMAT, "study_key": self.study_key, "strata": self.entries}
        folder = os.path.dirname(self.path) or "."
        fd, tmp = tempfile.mkstemp(prefix=".manifest-", suffix=".tmp", dir=folder)
        try:
            with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
                json.dump(data, fh, indent=2, sort_keys=True, default=str)
                fh.write("\n")
            os.replace(tmp, self.path)
        finally:
            if os.path.exists(tmp):
                os.remove(tmp)

    def count(self, status: str) -> int:
        """How many entries have ``status``."""
        return sum(1 for e in self.entries.values() if e.get("status") == status)


def folder_complete(folder: str) -> bool:
    """Whether ``folder`` is a finished stratum report (its page and marker are there).

    >>> folder_complete("/no/such/folder")
    False
    """
    from bayeszi.app.report.output import MARKER
    from bayeszi.app.report.write import REPORT_NAME

    return all(os.path.isfile(os.path.join(folder, n)) for n in (MARKER, REPORT_NAME))


__all__ = ["DONE", "FAILED", "MANIFEST_NAME", "Manifest", "SKIPPED", "folder_complete"]
