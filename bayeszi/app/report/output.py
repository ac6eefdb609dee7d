"""The output folder of a report, written in full or not at all.

:class:`OutputFolder` checks the destination before any work starts (the parent folder
exists and is writable, the destination is not a file or someone else's folder), makes a
temporary folder beside it, and on :meth:`OutputFolder.commit` renames that folder into
place. If anything fails, the temporary folder is removed and an earlier report at the
destination is left as it was. A marker file tells a bayeszi report folder from others, so
an unrelated folder is never replaced.

Example
-------
>>> import tempfile, os
>>> root = tempfile.mkdtemp()
>>> with OutputFolder(os.path.join(root, "report")) as out:
...     _ = out.write_text("report.html", "<html></html>")
...     _ = out.commit()
>>> sorted(os.listdir(os.path.join(root, "report")))
['.bayeszi-report', 'report.html']
"""

from __future__ import annotations

import os
import shutil
import tempfile
from types import TracebackType

from bayeszi.base.errors import BayesziError

MARKER = ".bayeszi-report"


def check_destination(path: str) -> str:
    """Refuse a destination that cannot take a report; returns its absolute path."""
    dest = os.path.abspath(os.fspath(path))
    parent = os.path.dirname(dest)
    if not os.path.isdir(parent):
        raise BayesziError(f"cannot write the report to {path!r}: folder {parent!r} does not "
                           "exist; create it first or choose another --out")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise BayesziError(f"cannot write the report to {path!r}: folder {parent!r} is not "
                           "writable; choose another --out")
    if os.path.lexists(dest):
        if not os.path.isdir(dest) or os.path.islink(dest):
            raise BayesziError(f"cannot write the report to {path!r}: it exists and is not a "
                               "folder; choose another --out")
        entries = os.listdir(dest)
        if entries and MARKER not in entries:
            raise BayesziError(f"{path!r} exists and holds files that are not a bayeszi report; "
                               "choose another --out or empty that folder")
    return dest


class OutputFolder:
    """A temporary folder beside ``path`` that becomes ``path`` on :meth:`commit`."""

    def __init__(self, path: str) -> None:
        self.dest = check_destination(path)
        parent, name = os.path.split(self.dest)
        try:
            self.tmp = tempfile.mkdtemp(prefix=f".{name}.partial-", dir=parent)
        except OSError as err:
            raise BayesziError(f"cannot write the report to {path!r}: {err.strerror or err}; "
                               "choose another --out") from None
        self.committed = False

    # -------------------------------------------------------------- writing
    def path(self, relative: str) -> str:
        """Absolute path of ``relative`` inside the temporary folder (parents are made)."""
        if os.path.isabs(relative) or ".." in relative.replace("\\", "/").split("/"):
            raise ValueError(f"output names must stay inside the folder: {relative!r}")
        full = os.path.join(self.tmp, relative)
        os.makedirs(os.path.dirname(full), exist_ok=True)
        return full

    def write_text(self, relative: str, text: str) -> str:
        """Write UTF-8 text; returns the relative name."""
        with open(self.path(relative), "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
        return relative

    def write_bytes(self, relative: str, data: bytes) -> str:
        """Write bytes; returns the relative name."""
        with open(self.path(relative), "wb") as fh:
            fh.write(data)
        return relative

    # -------------------------------------------------------------- finishing
    def commit(self) -> str:
        """Move the finished folder into place (replacing an earlier report); returns it."""
        self.write_text(MARKER, "This folder was written by bayeszi; it may be replaced by "
                        "the next run with the same --out.\n")
        parent, name = os.path.split(self.dest)
        old = None
        if os.path.isdir(self.dest):
            check_destination(self.dest)  # still ours (or empty)?
            old = tempfile.mkdtemp(prefix=f".{name}.old-", dir=parent)
            os.rmdir(old)
            os.rename(self.dest, old)
        try:
            os.rename(self.tmp, self.dest)
        except OSError:
            if old is not None:
                os.rename(old, self.dest)
            raise
        self.committed = True
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
        return self.dest

    def discard(self) -> None:
        """Remove the temporary folder (nothing at the destination changes)."""
        if not self.committed:
            shutil.rmtree(self.tmp, ignore_errors=True)

    def __enter__(self) -> OutputFolder:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.discard()
