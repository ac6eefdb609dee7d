"""Write a benchmark's results as JSON, with the machine they were measured on.

Every result file gets the platform, the CPU count, the load average at the end of the run
(this machine is shared: figures measured under load are inflated) and the time, and is
written under a temporary name and renamed, so an interrupted run leaves no half file.

Example
-------
>>> import os, tempfile, json
>>> path = os.path.join(tempfile.mkdtemp(), "r.json")
>>> _ = save_result(path, {"rows": [1, 2]})
>>> sorted(json.load(open(path)))
['cpus', 'load_avg', 'machine', 'rows', 'when']
"""

from __future__ import annotations

import json
import os
import platform
import time
from typing import Any


def save_result(path: str | None, fields: dict[str, Any]) -> dict[str, Any]:
    """``fields`` plus the machine facts, written to ``path`` (nothing when None); returns
    what was (or would have been) written."""
    result = {"machine": platform.platform(), "cpus": os.cpu_count(),
              "load_avg": os.getloadavg(), "when": time.strftime("%Y-%m-%d %H:%M"), **fields}
    if path:
        with open(path + ".tmp", "w", encoding="utf-8") as fh:
            json.dump(result, fh, indent=1)
        os.replace(path + ".tmp", path)
    return result
