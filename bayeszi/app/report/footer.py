"""The reproducibility footer of a report: versions, seed, hashes, command line and time.

Example
-------
>>> lines = footer_lines({"data_path": "d.csv", "data_sha256": "ab12"}, {}, seed=1)
>>> lines[1], lines[2]
('Seed: 1', 'Data: d.csv (sha256 ab12)')
"""

from __future__ import annotations

import datetime as _dt
import importlib
import platform
import sys
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from bayeszi.fitting.fitted import FittedModel


VERSIONED = ("numpy", "pandas", "scipy", "pymc", "pytensor", "arviz", "formulaic", "matplotlib")


def versions() -> dict[str, str]:
    """Versions of Python, bayeszi and the libraries the numbers come from."""
    from bayeszi.base.version import __version__

    out = {"bayeszi": __version__, "python": platform.python_version()}
    for name in VERSIONED:
        try:
            out[name] = importlib.import_module(name).__version__
        except Exception:  # pragma: no cover - every one is a dependency
            out[name] = "not installed"
    return out


def footer_lines(provenance: Mapping[str, Any], fits: Mapping[str, FittedModel],
                 seed: int | None) -> list[str]:
    """The reproducibility footer: versions, seed, data hash, command line, time.

    ``provenance`` may hold ``data_path``, ``data_sha256``, ``study_path``,
    ``study_sha256``, ``saved_fits`` (path -> sha256), ``fit command``, ``command`` and,
    for one stratum of a study, ``stratum``, ``stratum_records`` and ``stratum_sha256``.
    """
    p = provenance
    lines = ["Versions: " + ", ".join(f"{k} {v}" for k, v in versions().items())]
    seeds = sorted({str(f.spec.sampler.seed) for f in fits.values()})
    lines.append(f"Seed: {seed if seed is not None else 'none'}"
                 + (f" (models: {', '.join(seeds)})" if seeds and seeds != [str(seed)] else ""))
    if p.get("data_sha256"):
        lines.append(f"Data: {p.get('data_path', '?')} (sha256 {p['data_sha256']})")
    if p.get("stratum"):
        lines.append(f"Stratum: {p['stratum']} ({p.get('stratum_records', '?')} records, "
                     f"sha256 {p.get('stratum_sha256', '?')} of its rows as CSV)")
    if p.get("study_sha256"):
        lines.append(f"Study file: {p.get('study_path', '?')} (sha256 {p['study_sha256']})")
    for fit_path, digest in p.get("saved_fits", {}).items():
        lines.append(f"Saved fit: {fit_path} (sha256 {digest})")
    if p.get("fit command"):
        lines.append(f"Fits made by: {p['fit command']}")
    if p.get("command"):
        lines.append(f"Command: {p['command']}")
    lines.append(f"Written: {_dt.datetime.now(_dt.UTC).strftime('%Y-%m-%d %H:%M UTC')}"
                 f" on {platform.system()} {platform.machine()}, "
                 f"{sys.implementation.name} {platform.python_version()}")
    return lines


__all__ = ["footer_lines", "versions"]
