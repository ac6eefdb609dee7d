"""Save a fitted model to one netCDF file and load it back exactly.

The file is an ArviZ InferenceData netCDF. Its ``constant_data`` group holds the columns of
the fitted data that the model uses (so the design, including factor levels and centring, is
rebuilt exactly on load), and the posterior's attributes hold the spec, the bayeszi version
and the file format number, and a SHA-256 checksum of every stored array, so a damaged file
is refused instead of read wrongly. Files are written to a temporary name and renamed, so an
interrupted save (Ctrl-C, a full disk) leaves no partial file behind.

Compatibility: a file of the same format number loads whatever bayeszi version wrote it (a
different version is named in a :class:`~bayeszi.model.validate.BayesziWarning`); a file of a newer
or older format, or one whose model this bayeszi rebuilds differently, is refused with a
:class:`~bayeszi.base.errors.BayesziError` that says why.

Example
-------
>>> fitted.save("crayfish_fit.nc")              # doctest: +SKIP
>>> same = bayeszi.load("crayfish_fit.nc")      # doctest: +SKIP
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
import warnings
from typing import Any

import arviz as az
import numpy as np
import pandas as pd
import xarray as xr

from bayeszi.base import names
from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.base.spec import ModelSpec
from bayeszi.base.version import __version__
from bayeszi.engine.fit import rebuild_record
from bayeszi.engine.record import FitRecord
from bayeszi.model.distributions import upgrade_saved_priors

FORMAT = 1
"""File format number: raised whenever a file written now could not be read by older code."""
OLDEST_FORMAT = 1
"""The oldest file format this bayeszi reads."""


def _version() -> str:
    return __version__


def _frame_to_dataset(df: pd.DataFrame) -> tuple[xr.Dataset, dict[str, str]]:
    kinds: dict[str, str] = {}
    data_vars = {}
    for c in df.columns:
        s = df[c]
        if pd.api.types.is_bool_dtype(s):
            kinds[c] = "bool"
            data_vars[c] = ("obs", s.to_numpy().astype(np.int8))
        elif pd.api.types.is_numeric_dtype(s):
            values = np.asarray(s.to_numpy())  # nullable Int64/Float64 become NumPy dtypes
            kinds[c] = str(values.dtype)
            data_vars[c] = ("obs", values)
        else:
            kinds[c] = "str"
            data_vars[c] = ("obs", s.astype(str).to_numpy(dtype=object))
    data_vars["__row_label__"] = ("obs", np.array([str(i) for i in df.index], dtype=object))
    kinds["__index__"] = "int" if pd.api.types.is_integer_dtype(df.index) else "str"
    return xr.Dataset(data_vars), kinds


def _dataset_to_frame(ds: xr.Dataset, kinds: dict[str, str]) -> pd.DataFrame:
    cols = {}
    for c, kind in kinds.items():
        if c == "__index__":
            continue
        v = ds[c].values
        if kind == "bool":
            cols[c] = v.astype(bool)
        elif kind == "str":
            cols[c] = v.astype(str).astype(object)
        else:
            cols[c] = v.astype(kind)
    return pd.DataFrame(cols)


def check_writable(path: str, what: str = "the fit") -> str:
    """Fail with a :class:`BayesziError` unless a file can be written at ``path``.

    Checks that the folder exists, that ``path`` is not a folder, and that a file can really
    be created there (a probe file is made and removed, so even read-only mounts and special
    file systems are caught). Call it before sampling; returns the absolute path.

    Example
    -------
    >>> import tempfile, os
    >>> check_writable(os.path.join(tempfile.mkdtemp(), "fit.nc")).endswith("fit.nc")
    True
    """
    path = os.path.abspath(os.fspath(path))
    folder = os.path.dirname(path)
    if os.path.isdir(path):
        raise BayesziError(f"cannot save {what} to {path!r}: it is a folder; give a file name")
    if not os.path.isdir(folder):
        raise BayesziError(f"cannot save {what} to {path!r}: folder {folder!r} does not exist; "
                           "create it first or choose another path")
    try:
        fd, probe = tempfile.mkstemp(prefix=".bayeszi-probe-", dir=folder)
    except OSError as err:
        raise BayesziError(f"cannot save {what} to {path!r}: folder {folder!r} is not writable "
                           f"({err.strerror or err}); choose another path") from None
    os.close(fd)
    os.remove(probe)
    return path


def _checksum(groups: dict[str, xr.Dataset], meta: dict[str, Any]) -> str:
    """SHA-256 over every stored array and coordinate (names, dims, values) and over the
    metadata (all but the checksum itself), in a fixed order.

    Values are hashed as float64 (numbers) or as text (labels), so the type changes a
    netCDF round trip may make (bool to int8, say) do not change the checksum.
    """
    h = hashlib.sha256()
    rest = {k: v for k, v in meta.items() if k != "checksum"}
    h.update(json.dumps(rest, sort_keys=True, default=str).encode())
    for g in sorted(groups):
        ds = groups[g]
        for name in sorted(map(str, ds.variables)):
            da = ds[name]
            h.update(f"{g}/{name}{tuple(map(str, da.dims))}{da.shape}".encode())
            v = np.asarray(da.values)
            if v.dtype.kind in "biuf":
                h.update(np.ascontiguousarray(v, dtype=np.float64).tobytes())
            else:
                h.update("\x1f".join(map(str, v.ravel())).encode("utf-8", "surrogatepass"))
    return h.hexdigest()


def save(fitted: FitRecord, path: str) -> str:
    """Write ``fitted`` to ``path`` (netCDF) via a temporary file and an atomic rename."""
    path = check_writable(path)
    folder = os.path.dirname(path)
    idata = fitted.idata.copy()
    ds, kinds = _frame_to_dataset(fitted.data)
    idata.add_groups(constant_data=ds)
    meta = {
        "format": FORMAT,
        "bayeszi_version": _version(),
        "spec": fitted.spec.to_dict(),
        "column_kinds": kinds,
        "timing": fitted.timing,
    }
    meta["checksum"] = _checksum({g: idata[g] for g in idata.groups()}, meta)
    idata.posterior.attrs["bayeszi"] = json.dumps(meta)
    try:
        fd, tmp = tempfile.mkstemp(prefix=".bayeszi-", suffix=".nc.tmp", dir=folder)
    except OSError as err:
        raise BayesziError(f"cannot save to {path!r}: {err.strerror or err}") from None
    os.close(fd)
    try:
        idata.to_netcdf(tmp, engine="h5netcdf")
        os.replace(tmp, path)
    except OSError as err:  # full disk, lost permission, ...: nothing is left behind
        if os.path.exists(tmp):
            os.remove(tmp)
        raise BayesziError(f"could not write {path!r}: {err.strerror or err}; nothing was "
                           "written") from None
    except BaseException:  # Ctrl-C included: remove the partial file, then re-raise
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
    return path


def _damaged(path: str, why: str) -> BayesziError:
    return BayesziError(f"{path!r} is not a readable bayeszi fit ({why}); it may be truncated, "
                        "damaged or written by another program. Refit and save again")


def _read_meta(groups: dict[str, xr.Dataset], path: str) -> dict[str, Any]:
    if "posterior" not in groups or "bayeszi" not in groups["posterior"].attrs:
        raise BayesziError(
            f"{path!r} holds no bayeszi metadata: it was not written by bayeszi's save() (perhaps "
            "by ArviZ directly or another program). Save fits with fitted.save(path)"
        )
    try:
        meta = json.loads(groups["posterior"].attrs["bayeszi"])
    except (TypeError, ValueError):
        raise _damaged(path, "its bayeszi metadata is not valid JSON") from None
    if not isinstance(meta, dict):
        raise _damaged(path, "its bayeszi metadata is not a table of settings")
    return meta


def _check_format(meta: dict[str, Any], path: str) -> None:
    fmt = meta.get("format")
    version = meta.get("bayeszi_version", "an unknown version")
    if isinstance(fmt, bool) or not isinstance(fmt, int):
        raise _damaged(path, f"its file format number is {fmt!r}, not a whole number")
    if fmt > FORMAT:
        raise BayesziError(
            f"{path!r} was written by bayeszi {version} in file format {fmt}, newer than this "
            f"bayeszi ({_version()}, format {FORMAT}) reads; upgrade bayeszi to load it"
        )
    if fmt < OLDEST_FORMAT:
        raise BayesziError(
            f"{path!r} was written by bayeszi {version} in file format {fmt}, older than this "
            f"bayeszi ({_version()}) reads (formats {OLDEST_FORMAT} to {FORMAT}); load it with "
            f"bayeszi {version}, or refit the model and save it again"
        )


def load(path: str) -> FitRecord:
    """Read a fit written by :func:`save`; a damaged file is a BayesziError."""
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise BayesziError(f"no saved fit at {path!r}; check the path")
    try:
        raw = az.from_netcdf(path, engine="h5netcdf")
        groups = {g: raw[g].load() for g in raw.groups()}
    except Exception as err:  # damaged, truncated, or not netCDF at all
        raise _damaged(path, type(err).__name__) from None
    meta = _read_meta(groups, path)
    _check_format(meta, path)
    version = meta.get("bayeszi_version", "an unknown version")
    for key in ("spec", "column_kinds"):
        if not isinstance(meta.get(key), dict):
            raise _damaged(path, f"its metadata lacks {key!r}")
    if "constant_data" not in groups:
        raise _damaged(path, "the fitted data (constant_data) are missing")
    if "checksum" in meta:
        if _checksum(groups, meta) != meta["checksum"]:
            raise _damaged(path, "its contents do not match the checksum written when it was "
                           "saved")
    try:
        const = groups.pop("constant_data")
        kinds = meta["column_kinds"]
        data = _dataset_to_frame(const, kinds)
        labels = const["__row_label__"].values.astype(str)
        int_index = kinds.get("__index__") == "int"
        data.index = pd.Index(labels.astype(np.int64) if int_index else labels)
        idata = az.InferenceData(**groups)
        idata.posterior.attrs.pop("bayeszi", None)
    except Exception as err:  # columns missing or of the wrong type
        raise _damaged(path, f"its fitted data cannot be rebuilt: {type(err).__name__}") \
            from None
    try:
        spec = ModelSpec.from_dict(_upgraded_spec(meta["spec"]))
    except (BayesziError, TypeError) as err:
        raise BayesziError(
            f"{path!r} was written by bayeszi {version}, whose model settings this bayeszi "
            f"({_version()}) cannot read: {err}. Load it with bayeszi {version}, or refit"
        ) from None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the data warnings were shown at fit time
            timing = meta.get("timing", {})
            fitted = rebuild_record(spec, data, idata,
                                    dict(timing) if isinstance(timing, dict) else {})
    except BayesziError as err:
        raise BayesziError(f"{path!r}: the saved model cannot be rebuilt from its data: {err}") \
            from None
    _check_consistent(fitted, path, version)
    if version != _version():
        warnings.warn(
            f"{path!r} was saved by bayeszi {version} and is loaded by bayeszi {_version()}: "
            f"the file format ({meta['format']}) is the same, so the draws load unchanged, but "
            "tables and checks are computed by this version's code",
            BayesziWarning,
            stacklevel=3,
        )
    return fitted


def _upgraded_spec(saved: dict[str, Any]) -> dict[str, Any]:
    """The saved spec with priors written in the list form of bayeszi 0.1 (``["normal", 0,
    1]``) turned into today's mappings, so that fits saved then still load."""
    if not isinstance(saved.get("priors"), dict):
        return saved
    return {**saved, "priors": upgrade_saved_priors(saved["priors"])}


def _check_consistent(fitted: FitRecord, path: str, version: str) -> None:
    """The rebuilt design must match the stored draws (terms, groups, rows)."""
    post = fitted.idata.posterior
    problems = []
    for part, pdes in zip(names.PARTS, (fitted.design.counts, fitted.design.zeros),
                          strict=True):
        coord = names.term_dim(part)
        if pdes is None:
            continue
        stored = [str(t) for t in post.coords[coord].values] if coord in post.coords else None
        if stored != pdes.terms:
            problems.append(f"{part} terms {stored} stored, {pdes.terms} rebuilt")
    for g in fitted.design.groups:
        stored = [str(v) for v in post.coords[g.name].values] if g.name in post.coords else None
        if stored != g.levels:
            problems.append(f"levels of {g.name!r} differ")
    obs = fitted.idata.get("observed_data")
    if obs is not None and names.RESPONSE in obs and not np.array_equal(
            np.asarray(obs[names.RESPONSE].values).reshape(-1), fitted.design.y):
        problems.append("the stored counts differ from the stored data")
    if problems:
        raise BayesziError(
            f"{path!r} (saved by bayeszi {version}) does not fit together when rebuilt by "
            f"bayeszi {_version()}: {'; '.join(problems)}. Refit the model and save it again"
        )
