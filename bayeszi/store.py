"""Save a fitted model to one netCDF file and load it back exactly.

The file is an ArviZ InferenceData netCDF. Its ``constant_data`` group holds the columns of
the fitted data that the model uses (so the design, including factor levels and centring, is
rebuilt exactly on load), and the posterior's attributes hold the spec, the bayeszi version
and the file format number. Files are written to a temporary name and renamed.

Example
-------
>>> fitted.save("crayfish_fit.nc")              # doctest: +SKIP
>>> same = bayeszi.load("crayfish_fit.nc")      # doctest: +SKIP
"""

from __future__ import annotations

import json
import os
import tempfile
import warnings
from typing import TYPE_CHECKING

import arviz as az
import numpy as np
import pandas as pd
import xarray as xr

from bayeszi.errors import BayesziError

if TYPE_CHECKING:
    from bayeszi.fitted import FittedModel

FORMAT = 1


def _version() -> str:
    from bayeszi import __version__

    return __version__


def training_frame(fitted: FittedModel) -> pd.DataFrame:
    """The used columns of the fitted data, rebuilt from the stored constant data."""
    return fitted._data  # type: ignore[attr-defined]


def _frame_to_dataset(df: pd.DataFrame) -> tuple[xr.Dataset, dict[str, str]]:
    kinds: dict[str, str] = {}
    data_vars = {}
    for c in df.columns:
        s = df[c]
        if pd.api.types.is_bool_dtype(s):
            kinds[c] = "bool"
            data_vars[c] = ("obs", s.to_numpy().astype(np.int8))
        elif pd.api.types.is_numeric_dtype(s):
            kinds[c] = str(s.dtype)
            data_vars[c] = ("obs", s.to_numpy())
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


def save(fitted: FittedModel, path: str) -> str:
    """Write ``fitted`` to ``path`` (netCDF) via a temporary file and an atomic rename."""
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise BayesziError(f"cannot save to {path!r}: folder {folder!r} does not exist")
    if not os.access(folder, os.W_OK):
        raise BayesziError(f"cannot save to {path!r}: folder {folder!r} is not writable")
    idata = fitted.idata.copy()
    ds, kinds = _frame_to_dataset(training_frame(fitted))
    idata.add_groups(constant_data=ds)
    meta = {
        "format": FORMAT,
        "bayeszi_version": _version(),
        "spec": fitted.spec.to_dict(),
        "column_kinds": kinds,
        "timing": fitted.timing,
    }
    idata.posterior.attrs["bayeszi"] = json.dumps(meta)
    fd, tmp = tempfile.mkstemp(prefix=".bayeszi-", suffix=".nc.tmp", dir=folder)
    os.close(fd)
    try:
        idata.to_netcdf(tmp, engine="h5netcdf")
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
    return path


def load(path: str) -> FittedModel:
    """Read a fit written by :meth:`FittedModel.save`; a damaged file is a BayesziError."""
    from bayeszi.api import assemble
    from bayeszi.spec import ModelSpec

    path = os.fspath(path)
    if not os.path.isfile(path):
        raise BayesziError(f"no saved fit at {path!r}; check the path")
    try:
        raw = az.from_netcdf(path, engine="h5netcdf")
        groups = {g: raw[g].load() for g in raw.groups()}
        meta = json.loads(groups["posterior"].attrs["bayeszi"])
    except Exception as err:  # damaged, truncated, or not ours
        raise BayesziError(
            f"{path!r} is not a readable bayeszi fit ({type(err).__name__}); it may be "
            "truncated or from another program. Refit and save again"
        ) from None
    if int(meta.get("format", 0)) > FORMAT:
        raise BayesziError(
            f"{path!r} was written by bayeszi {meta.get('bayeszi_version')} in file format "
            f"{meta.get('format')}, newer than this bayeszi ({_version()}, format {FORMAT}) "
            "reads; upgrade bayeszi"
        )
    const = groups.pop("constant_data")
    data = _dataset_to_frame(const, meta["column_kinds"])
    labels = const["__row_label__"].values.astype(str)
    int_index = meta["column_kinds"].get("__index__") == "int"
    data.index = pd.Index(labels.astype(np.int64) if int_index else labels)
    idata = az.InferenceData(**groups)
    idata.posterior.attrs.pop("bayeszi", None)
    spec = ModelSpec.from_dict(meta["spec"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the data warnings were shown at fit time
        fitted = assemble(spec, data, idata)
    fitted.timing = dict(meta.get("timing", {}))
    return fitted
