"""2-D validity maps: where does one order stay valid, as a model parameter varies?

:func:`validity_map` rebuilds a model for each value of one builder parameter
(a detuning, an anharmonicity, a basis size, ...) and finds the validity
boundary λ* of one order for one level or quantity; with ``couplings`` given
it also evaluates the error on the grid parameter × coupling.  Each parameter
value is one independent task, run on any :class:`concurrent.futures.Executor`:

- ``executor=None``: a local :class:`~concurrent.futures.ProcessPoolExecutor`
  with 2 workers (started and shut down inside the call);
- ``executor="serial"``: in this process, one task after the other;
- any executor you pass, e.g. a dask cluster's (a dask ``Client`` itself is
  accepted too and used through ``client.get_executor()``)::

      from dask.distributed import Client
      with Client("tcp://scheduler:8786") as client:     # or Client(LocalCluster(...))
          vm = validity_map("kerr_qubit_resonator", "omega_r", values, level=chi,
                            order=2, rtol=0.01, executor=client.get_executor())

If the call is interrupted (Ctrl-C, or an exception raised by a signal
handler), the worker processes of the default pool are terminated before the
exception propagates: no worker outlives the call.  Workers of the default
pool ignore SIGINT themselves (the caller decides); tasks already sent to an
executor you passed are cancelled where the executor allows it.

Tasks are the module-level function :func:`_map_task` applied to picklable
jobs, and every task computes exactly what the serial loop computes, so the
result does not depend on the executor.  Each task limits BLAS to one thread
(with ``threadpoolctl``, when it is installed): tasks side by side then do not
oversubscribe the cores, and the numbers are bit-for-bit the same everywhere.  Pass a builder by its name in
:data:`ptcheck.models.BUILDERS` (always importable on workers) or as a
module-level function.
"""

from __future__ import annotations

import contextlib
import html
import math
import signal
import warnings
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import Executor, ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import _validation as val
from ._progress import ProgressCallback, report_progress
from .approximants import order_name, parse_order
from .compare import compare, validity_boundary
from .model import Model
from .quantities import Quantity

__all__ = ["ValidityMap", "validity_map", "DEFAULT_WORKERS"]

#: Workers of the default local process pool.
DEFAULT_WORKERS = 2


def _ro(a: Any, dtype: Any = float) -> np.ndarray:
    a = np.array(a, dtype=dtype)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, repr=False, eq=False)
class ValidityMap:
    """Validity of one order over a model parameter (and the coupling).

    Attributes
    ----------
    builder : str
        Name of the model builder.
    param_name : str
        The builder parameter varied.
    param_values : (P,) ndarray, read-only
        Its values, in the order given.
    target : str
        Level label or quantity name.
    order : int or Pade
    tol, rtol : float or None
        The tolerance (absolute, energy units; or relative).
    direction : int
        +1 or -1: the sign of the couplings searched.
    boundary : (P,) ndarray, read-only
        Signed validity boundary λ* for each parameter value (``±inf``: not
        reached within the search range; NaN: ill defined or failed, see
        ``status`` and ``notes``).
    status : tuple of str, length P
        ``ValidityBoundary.status`` per value, or ``"error"`` when the model
        could not be built / checked (message in ``notes``).
    exact_solves : (P,) int ndarray, read-only
        Exact diagonalisations used per value.
    couplings : (C,) ndarray or None
        Coupling grid, if one was given.
    errors : (P, C) ndarray or None
        Error of the order (absolute or relative, as the tolerance) on the
        grid; NaN where undefined.
    notes : tuple of str
        Remarks, prefixed with the parameter value they concern.
    """

    builder: str
    param_name: str
    param_values: np.ndarray
    target: str
    order: Any
    tol: float | None
    rtol: float | None
    direction: int
    boundary: np.ndarray
    status: tuple
    exact_solves: np.ndarray
    couplings: np.ndarray | None = None
    errors: np.ndarray | None = None
    notes: tuple = field(default=())

    @property
    def tolerance(self) -> float:
        """The tolerance value (``tol`` or ``rtol``)."""
        return self.rtol if self.rtol is not None else self.tol

    @property
    def valid(self) -> np.ndarray | None:
        """(P, C) bool: error within tolerance on the grid (None without a grid)."""
        if self.errors is None:
            return None
        with np.errstate(invalid="ignore"):
            return np.asarray(self.errors <= self.tolerance)

    def caption(self) -> str:
        """One-line description for figure captions."""
        kind = f"relative tolerance {self.rtol:g}" if self.rtol is not None else f"absolute tolerance {self.tol:g}"
        return (
            f"Validity map of {self.target}, {order_name(self.order)} ({kind}) over {self.param_name} "
            f"(model {self.builder}): the order meets the tolerance below the line λ*."
        )

    def __repr__(self) -> str:
        grid = f", grid {self.errors.shape}" if self.errors is not None else ""
        return (
            f"ValidityMap({self.builder}, {self.param_name} × λ, {self.target}, {order_name(self.order)}, "
            f"{self.param_values.size} values{grid})"
        )

    def to_dict(self) -> dict:
        def f(x: float) -> float | str:
            return float(x) if math.isfinite(x) else str(float(x))

        return {
            "builder": self.builder,
            "param_name": self.param_name,
            "param_values": [float(x) for x in self.param_values],
            "target": self.target,
            "order": order_name(self.order),
            "tol": self.tol,
            "rtol": self.rtol,
            "direction": self.direction,
            "boundary": [f(x) for x in self.boundary],
            "status": list(self.status),
            "exact_solves": [int(x) for x in self.exact_solves],
            "couplings": None if self.couplings is None else [float(x) for x in self.couplings],
            "errors": None if self.errors is None else [[f(x) for x in row] for row in self.errors],
            "notes": list(self.notes),
        }

    def to_markdown(self) -> str:
        """A section for a Markdown report: λ* per parameter value."""
        rows = "\n".join(
            f"| {p:.6g} | {'not reached' if math.isinf(b) else ('—' if math.isnan(b) else f'{abs(b):.4g}')} | {s} |"
            for p, b, s in zip(self.param_values, self.boundary, self.status)
        )
        return (
            f"## Validity map\n\n{self.caption()}\n\n| {self.param_name} | λ* | status |\n|---|---|---|\n{rows}\n"
        )

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{p:.6g}</td><td>{b:.6g}</td><td>{html.escape(s)}</td></tr>"
            for p, b, s in zip(self.param_values, self.boundary, self.status)
        )
        return (
            f"<b>{html.escape(self.caption())}</b><table><tr><th>{html.escape(self.param_name)}</th>"
            f"<th>λ*</th><th>status</th></tr>{rows}</table>"
        )


# ---------------------------------------------------------------------- tasks
@dataclass(frozen=True)
class _Job:
    """Everything one task needs (picklable)."""

    index: int
    builder: Any  # name in BUILDERS or a module-level function
    param_name: str
    value: Any
    builder_kwargs: dict
    level: Any
    order: Any
    tol: float | None
    rtol: float | None
    couplings: np.ndarray | None
    direction: int
    treatment: str
    backend: str
    max_coupling: float | None


@dataclass(frozen=True)
class _Point:
    index: int
    boundary: float
    status: str
    exact_solves: int
    errors: np.ndarray | None
    notes: tuple


def _resolve_builder(builder: Any) -> Callable[..., Model]:
    if isinstance(builder, str):
        from .models import BUILDERS

        return BUILDERS[builder]
    return builder


def _single_thread_blas() -> Any:
    """Context limiting BLAS to one thread (no-op without threadpoolctl).

    Tasks run side by side on the cores; multi-threaded BLAS inside each would
    oversubscribe them.  The same limit in every task (serial ones too) also
    makes the numbers bit-for-bit the same on every executor.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # optional dependency
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def _map_task(job: _Job) -> _Point:
    """Compute one parameter value of a validity map (runs on a worker)."""
    with _single_thread_blas():
        return _map_point(job)


def _map_point(job: _Job) -> _Point:
    prefix = f"{job.param_name} = {job.value:g}: " if isinstance(job.value, (int, float)) else f"{job.param_name} = {job.value!r}: "
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            model = _resolve_builder(job.builder)(**job.builder_kwargs, **{job.param_name: job.value})
            b = validity_boundary(
                model, job.level, job.order, tol=job.tol, rtol=job.rtol, direction=job.direction,
                treatment=job.treatment, backend=job.backend, max_coupling=job.max_coupling,
            )
            errs = None
            solves = b.exact_solves
            if job.couplings is not None:
                # judge near-degeneracy ("auto") where the boundary was found, as the boundary search did
                at = abs(b.coupling) if math.isfinite(b.coupling) and b.coupling != 0 else None
                c = compare(model, [job.level], [job.order], job.couplings, treatment=job.treatment, backend=job.backend,
                            coupling=at)
                errs = np.array((c.rel_error if job.rtol is not None else c.abs_error)[0, 0], dtype=float)
                solves += c.exact_solves
            notes = tuple(prefix + n for n in b.notes[1:])  # [0] is the generic truncation note
            point = _Point(job.index, float(b.coupling), b.status, int(solves), errs, notes)
        except (ValueError, TypeError, ArithmeticError) as exc:
            n_c = 0 if job.couplings is None else len(job.couplings)
            point = _Point(job.index, math.nan, "error", 0, None if job.couplings is None else np.full(n_c, np.nan),
                           (prefix + f"{type(exc).__name__}: {exc}",))
    extra = tuple(prefix + f"{w.category.__name__}: {w.message}" for w in caught)
    return _Point(point.index, point.boundary, point.status, point.exact_solves, point.errors, point.notes + extra)


# ---------------------------------------------------------------------- public
def validity_map(
    builder: str | Callable[..., Model],
    param_name: str,
    param_values: Sequence[Any],
    *,
    level: Any,
    order: Any,
    tol: float | None = None,
    rtol: float | None = None,
    couplings: Any = None,
    builder_kwargs: Mapping[str, Any] | None = None,
    executor: Executor | str | None = None,
    progress: ProgressCallback | None = None,
    direction: int = +1,
    treatment: str = "standard",
    backend: str = "auto",
    max_coupling: float | None = None,
) -> ValidityMap:
    """Validity boundary (and error on a coupling grid) over one model parameter.

    Parameters
    ----------
    builder : str or callable
        Name in :data:`ptcheck.models.BUILDERS`, or a module-level function
        returning a :class:`Model` from keyword arguments.
    param_name : str
        Keyword of the builder to vary.
    param_values : sequence, length P
        Its values (numbers; ints for sizes).
    level : level key or Quantity
        What to check (resolved in each model).
    order : int, Pade or str
        One order spec.
    tol, rtol : float
        Absolute (energy units) or relative tolerance; exactly one.
    couplings : (C,) array_like, optional
        Also evaluate the error on this grid (for the map's colour scale).
    builder_kwargs : mapping, optional
        The builder's other keyword arguments (fixed).
    executor : Executor, "serial" or None
        Where tasks run (see the module docstring).  Default: a local process
        pool with :data:`DEFAULT_WORKERS` workers.
    progress : callable(done, total), optional
        Called as tasks finish.
    direction : {+1, -1}
        Sign of the couplings searched.
    treatment, backend : str
        As for :func:`ptcheck.compare.validity_boundary`.
    max_coupling : float, optional
        Largest |λ| searched.

    Returns
    -------
    ValidityMap

    Examples
    --------
    >>> vm = validity_map("two_level", "delta", [1.0, 2.0], level=0, order=2,
    ...                   rtol=0.01, executor="serial")
    >>> vm.boundary.shape
    (2,)
    """
    if isinstance(builder, str):
        from .models import BUILDERS

        if builder not in BUILDERS:
            raise ValueError(f"unknown builder {builder!r}; known: {', '.join(sorted(BUILDERS))}")
        bname = builder
    elif callable(builder):
        bname = getattr(builder, "__name__", repr(builder))
        if "<" in getattr(builder, "__qualname__", ""):
            raise TypeError(
                f"builder {bname!r} is a lambda or a local function; worker processes cannot import it. "
                "Define it at module level or pass a name from ptcheck.models.BUILDERS."
            )
    else:
        raise TypeError(f"builder must be a builder name or a function; got {builder!r}")
    if not isinstance(param_name, str) or not param_name:
        raise TypeError(f"param_name must be the name of a builder keyword (str); got {param_name!r}")
    kwargs = dict(builder_kwargs or {})
    if param_name in kwargs:
        raise ValueError(f"builder_kwargs must not contain the varied parameter {param_name!r}")
    if isinstance(param_values, (str, bytes)) or not hasattr(param_values, "__len__"):
        raise TypeError(f"param_values must be a sequence of values; got {param_values!r}")
    values = list(np.asarray(param_values).tolist()) if isinstance(param_values, np.ndarray) else list(param_values)
    if not values:
        raise ValueError("param_values is empty")
    if (tol is None) == (rtol is None):
        raise ValueError(f"give exactly one of tol or rtol; got tol={tol!r}, rtol={rtol!r}")
    thr = float(val.check_positive(tol if rtol is None else rtol, "tol" if rtol is None else "rtol"))
    tol, rtol = (thr, None) if rtol is None else (None, thr)
    spec = parse_order(order)
    if isinstance(direction, bool) or direction not in (1, -1):
        raise ValueError(f"direction must be +1 or -1; got {direction!r}")
    from .exact import BACKENDS
    from .treatment import TREATMENTS

    treatment = val.check_choice(treatment, "treatment", TREATMENTS)
    backend = val.check_choice(backend, "backend", BACKENDS)
    max_coupling = val.check_positive(max_coupling, "max_coupling", allow_none=True)
    executor = _as_executor(executor)
    grid = None if couplings is None else val.as_couplings(couplings)
    if isinstance(level, list):
        raise TypeError("validity_map takes one level or quantity; got a list")
    # build the first model here, so that a bad parameter name fails fast and clearly
    try:
        first = _resolve_builder(builder)(**kwargs, **{param_name: values[0]})
    except TypeError as exc:
        raise TypeError(f"{bname}({param_name}={values[0]!r}, ...) failed: {exc}") from None
    if not isinstance(first, Model):
        raise TypeError(f"builder {bname} returned {type(first).__name__}, not a Model")
    if isinstance(level, Quantity):
        level.resolve(first)  # raises for an unknown level
    else:
        first.level_index(level)

    jobs = [
        _Job(i, builder, param_name, v, kwargs, level, spec, tol, rtol, grid, direction, treatment, backend, max_coupling)
        for i, v in enumerate(values)
    ]
    points = _run(jobs, executor, progress)
    notes = tuple(n for p in points for n in p.notes)
    errors = None
    if grid is not None:
        errors = _ro(np.stack([p.errors if p.errors is not None else np.full(grid.size, np.nan) for p in points]))
    try:
        pv = _ro(values)
    except (TypeError, ValueError):
        pv = _ro(values, dtype=object)
    return ValidityMap(
        builder=bname,
        param_name=param_name,
        param_values=pv,
        target=level.name if isinstance(level, Quantity) else first.label(first.level_index(level)),
        order=spec,
        tol=tol,
        rtol=rtol,
        direction=direction,
        boundary=_ro([p.boundary for p in points]),
        status=tuple(p.status for p in points),
        exact_solves=_ro([p.exact_solves for p in points], dtype=int),
        couplings=None if grid is None else _ro(grid),
        errors=errors,
        notes=notes,
    )


def _as_executor(executor: Any) -> Executor | str | None:
    """None, "serial", a concurrent.futures Executor, or a dask Client (its executor)."""
    if executor is None or (isinstance(executor, str) and executor == "serial"):
        return executor
    if isinstance(executor, str):
        raise ValueError(f"executor must be a concurrent.futures.Executor, 'serial' or None; got {executor!r}")
    if isinstance(executor, Executor):
        return executor
    if callable(getattr(executor, "get_executor", None)):  # a dask.distributed Client
        return executor.get_executor()
    raise TypeError(
        "executor must be a concurrent.futures.Executor (e.g. client.get_executor() of a dask Client), "
        f"a dask Client, 'serial' or None; got {type(executor).__name__}"
    )


def _worker_init() -> None:
    """Workers of the default pool leave SIGINT to the caller, who stops them, and end quietly on SIGTERM.

    A forked worker inherits the caller's Python signal handlers (the command
    line turns SIGTERM into an exception): those are reset here.
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)


def _stop_pool(pool: ProcessPoolExecutor) -> None:
    """Terminate the worker processes of a pool now (on an interrupt), then let the pool wind down.

    Its futures are not cancelled first: the pool marks them broken itself
    once its workers are gone (cancelling them too trips the pool's own
    bookkeeping on Python 3.11).
    """
    kill = getattr(pool, "terminate_workers", None)  # Python >= 3.14
    if callable(kill):
        kill()
        return
    procs = list((getattr(pool, "_processes", None) or {}).values())
    for p in procs:
        if p.is_alive():
            p.terminate()
    for p in procs:
        p.join(timeout=10)
    pool.shutdown(wait=False)
    manager = getattr(pool, "_executor_manager_thread", None)
    if manager is not None:
        manager.join(timeout=10)


def _run(jobs: list[_Job], executor: Executor | str | None, progress: ProgressCallback | None) -> list[_Point]:
    total = len(jobs)
    out: list[_Point | None] = [None] * total
    if isinstance(executor, str):  # "serial"
        for k, job in enumerate(jobs):
            out[job.index] = _map_task(job)
            report_progress(progress, k + 1, total)
        return out  # type: ignore[return-value]
    own = executor is None
    if own:
        executor = ProcessPoolExecutor(max_workers=min(DEFAULT_WORKERS, total), initializer=_worker_init)
    futures = []
    try:
        futures = [executor.submit(_map_task, job) for job in jobs]
        done = 0
        for fut in as_completed(futures):
            p = fut.result()
            out[p.index] = p
            done += 1
            report_progress(progress, done, total)
    except BaseException:
        if own:
            _stop_pool(executor)
        else:
            for fut in futures:
                fut.cancel()
        raise
    if own:
        executor.shutdown(wait=True)
    return out  # type: ignore[return-value]
