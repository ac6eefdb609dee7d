"""Compile a model's log density once per structure and reuse it with other data.

A bayeszi model is built with its data written into the graph as constants (design
matrices, log offsets, group codes, the observed counts' tables, the split between zero and
positive counts). Two models of the same candidate on two strata of one survey differ only
in those constants, yet PyMC compiles each one's log density and gradient afresh (graph
rewrites, linking: several seconds per fit). :class:`DensityCache` removes that cost:

- the *structure* of a model is its log-density graph with the data constants taken out:
  every node's operation, how the nodes connect, the type (dtype, rank, which axes have
  length 1) of each data constant, the value of every scalar constant (prior settings,
  literals) and the names and sizes of the free variables (so the number of group levels
  is part of it);
- the first model of a structure has its data constants replaced by shared variables
  (:func:`lift`), and its log density and gradient are compiled once, as PyMC's
  ``ValueGradFunction``;
- a later model of the same structure only sets those shared variables to its own
  constants and hands the compiled function to PyMC's NUTS (:meth:`DensityCache.attach`),
  which then samples as usual (same initialisation, same seeds).

The reused function computes the same density as a fresh compile; the two agree to
rounding (tests/test_strata.py checks 1e-9 at random points), but not bit for bit (the
lifted graph cannot fold constants), so a reused fit's draws are not those of a fresh
``bayeszi.fit`` with the same seed, only draws from the same posterior. Fits that use the
cache are reproducible among themselves: every fit of a structure uses the same lifted
function, whichever stratum came first. Only PyMC's NUTS uses the cache; nutpie compiles
its own (numba) function per fit.

Example
-------
>>> import pandas as pd
>>> from bayeszi.base.spec import ModelSpec
>>> from bayeszi.model.design import build_design
>>> from bayeszi.model.priors import resolve
>>> from bayeszi.model.build import build_model
>>> spec = ModelSpec(counts="y ~ x", family="poisson")
>>> def model(df):
...     d = build_design(df, spec)
...     return build_model(d, resolve(d, None)).model
>>> a = model(pd.DataFrame({"y": [0, 1, 3, 0, 2], "x": [0.1, 0.5, 0.9, 0.2, 0.4]}))
>>> b = model(pd.DataFrame({"y": [2, 0, 0, 0, 1, 4], "x": [0.3, 0.1, 0.2, 0.6, 0.5, 0.8]}))
>>> structure_key(a) == structure_key(b)
True
"""

from __future__ import annotations

import contextlib
import hashlib
import threading
import time
from collections import OrderedDict
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pymc as pm
import pytensor
from pytensor.graph.basic import Constant, Variable
from pytensor.graph.replace import clone_replace
from pytensor.graph.traversal import io_toposort
from pytensor.scalar import ScalarConstant
from pytensor.tensor.basic import scalar_from_tensor

#: structures kept per process (least recently used dropped first)
MAX_STRUCTURES = 8


def _is_data(const: Constant) -> bool:
    """Whether a constant is lifted (data): arrays of rank >= 1 and whole-number scalars of
    the scalar type (slice bounds, such as the number of zero counts). Rank-0 tensors
    (literals, prior settings) stay constants and are part of the structure."""
    if isinstance(const, ScalarConstant):
        return str(const.type.dtype).startswith(("int", "uint"))
    return getattr(const.type, "ndim", 0) >= 1


def _type_text(var: Variable) -> str:
    t = var.type
    if hasattr(t, "broadcastable"):
        return f"{type(t).__name__}:{t.dtype}:{tuple(bool(b) for b in t.broadcastable)}"
    return f"{type(t).__name__}:{getattr(t, 'dtype', '')}"


@dataclass
class Graph:
    """A model's log density with its data constants found, in a fixed order."""

    cost: Variable
    data: list[Constant]
    key: str


def density_graph(model: pm.Model) -> Graph:
    """The model's log density, its data constants (graph order) and its structure key."""
    cost = model.logp()
    ids: dict[int, str] = {}
    for i, v in enumerate(model.value_vars):
        ids[id(v)] = f"v{i}"
    h = hashlib.sha256()
    for v in model.value_vars:
        h.update(f"{v.name}:{_type_text(v)};".encode())
    point = model.initial_point(0)
    for name in sorted(point):
        h.update(f"{name}={np.shape(point[name])};".encode())
    data: list[Constant] = []
    for node in io_toposort(list(model.value_vars), [cost]):
        h.update(f"{node.op!s}|{type(node.op).__name__}(".encode())
        for inp in node.inputs:
            if id(inp) not in ids:
                if isinstance(inp, Constant) and _is_data(inp):
                    ids[id(inp)] = f"d{len(data)}:{_type_text(inp)}"
                    data.append(inp)
                elif isinstance(inp, Constant):
                    value = np.asarray(inp.data)
                    ids[id(inp)] = f"c:{_type_text(inp)}:{value.tobytes().hex()}"
                else:
                    ids[id(inp)] = f"?{_type_text(inp)}"
            h.update(ids[id(inp)].encode() + b",")
        h.update(b")->")
        for j, out in enumerate(node.outputs):
            ids[id(out)] = f"n{len(ids)}.{j}"
            h.update(ids[id(out)].encode() + b",")
    return Graph(cost, data, h.hexdigest())


def structure_key(model: pm.Model) -> str:
    """A hash of the model's structure (see the module text); equal keys, one compile."""
    return density_graph(model).key


def lift(graph: Graph) -> tuple[Variable, list[Any]]:
    """The log density with every data constant replaced by a shared variable.

    Returns the new cost and the shared variables, in the order of ``graph.data``.
    """
    shared: list[Any] = []
    replace: dict[Variable, Variable] = {}
    for const in graph.data:
        value = np.asarray(const.data)
        if isinstance(const, ScalarConstant):
            s = pytensor.shared(value.astype(const.type.dtype))
            replace[const] = scalar_from_tensor(s)
        else:
            shape = tuple(1 if b else None for b in const.type.broadcastable)
            s = pytensor.shared(value, shape=shape)
            replace[const] = s
        shared.append(s)
    (cost,) = clone_replace([graph.cost], replace=replace, rebuild_strict=False)
    return cost, shared


@dataclass
class _Entry:
    function: Any
    shared: list[Any]


@dataclass
class CacheStats:
    """What a :class:`DensityCache` did: compiles, reuses and the seconds each took."""

    compiled: int = 0
    reused: int = 0
    compile_s: float = 0.0
    swap_s: float = 0.0
    keys: list[str] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        """Plain numbers (for a manifest or a benchmark)."""
        return {"compiled": self.compiled, "reused": self.reused,
                "compile_s": round(self.compile_s, 3), "swap_s": round(self.swap_s, 3)}


class DensityCache:
    """Compiled log densities by structure, for one process (see the module text).

    Example
    -------
    >>> cache = DensityCache()
    >>> cache.stats.compiled, cache.stats.reused
    (0, 0)
    """

    def __init__(self, max_structures: int = MAX_STRUCTURES) -> None:
        self.max_structures = max_structures
        self.entries: OrderedDict[str, _Entry] = OrderedDict()
        self.stats = CacheStats()
        self.lock = threading.Lock()

    def function_for(self, model: pm.Model) -> Any:
        """The compiled log density and gradient of ``model`` (compiled or reused)."""
        t0 = time.perf_counter()
        graph = density_graph(model)
        with self.lock:
            entry = self.entries.get(graph.key)
            if entry is not None:
                for s, const in zip(entry.shared, graph.data, strict=True):
                    s.set_value(np.asarray(const.data, dtype=s.dtype))
                self.entries.move_to_end(graph.key)
                self.stats.reused += 1
                self.stats.swap_s += time.perf_counter() - t0
                return entry.function
            cost, shared = lift(graph)
            function = pm.model.core.ValueGradFunction(
                [cost], model.continuous_value_vars, {}, model=model,
                initial_point=model.initial_point(0), ravel_inputs=True)
            function.trust_input = True
            self.entries[graph.key] = _Entry(function, shared)
            while len(self.entries) > self.max_structures:
                self.entries.popitem(last=False)
            self.stats.compiled += 1
            self.stats.keys.append(graph.key)
            self.stats.compile_s += time.perf_counter() - t0
            return function

    def attach(self, model: pm.Model) -> None:
        """Make PyMC's NUTS on ``model`` use the cached function (compiling it if new).

        PyMC asks the model for its function once, in ``pm.sample``'s NUTS set-up; the
        model's own method answers every other request.
        """
        own = model.logp_dlogp_function
        cache = self

        def logp_dlogp_function(grad_vars=None, tempered=False, initial_point=None,
                                ravel_inputs=None, **kwargs):
            if grad_vars is None and not tempered and ravel_inputs and not kwargs:
                return cache.function_for(model)
            return own(grad_vars=grad_vars, tempered=tempered, initial_point=initial_point,
                       ravel_inputs=ravel_inputs, **kwargs)

        model.logp_dlogp_function = logp_dlogp_function


_ACTIVE: list[DensityCache] = []


@contextlib.contextmanager
def using(cache: DensityCache) -> Iterator[DensityCache]:
    """Within the block, every model :func:`attach_active` sees uses ``cache``.

    Example
    -------
    >>> with using(DensityCache()) as cache:
    ...     active() is cache
    True
    >>> active() is None
    True
    """
    _ACTIVE.append(cache)
    try:
        yield cache
    finally:
        _ACTIVE.remove(cache)


def active() -> DensityCache | None:
    """The cache of the innermost :func:`using` block, or None."""
    return _ACTIVE[-1] if _ACTIVE else None


def attach_active(model: pm.Model) -> bool:
    """Attach the active cache to ``model`` (see :meth:`DensityCache.attach`); False when
    no cache is active, which leaves the model as it was.

    Example
    -------
    >>> attach_active(None)   # no cache active: nothing happens
    False
    """
    cache = active()
    if cache is None:
        return False
    cache.attach(model)
    return True


__all__ = ["CacheStats", "DensityCache", "Graph", "active", "attach_active", "density_graph",
           "lift", "structure_key", "using"]
