"""Model files: a small TOML file that names a model and what to check about it.

The command line (``ptcheck check MODEL``) reads one of these; so can you, with
:func:`load_model_file`.  Every table and key is optional except ``[model]``;
unknown keys are refused (a typo must not pass silently).  Command-line flags
override the ``[check]`` table.

Schema
------
A built-in model (a name from :data:`ptcheck.models.BUILDERS`)::

    [model]
    builtin = "kerr_qubit_resonator"
    name = "my qubit"              # optional display name
    [model.params]                 # keyword arguments of the builder
    omega_q = 4.83
    g = 0.087
    n_photons = 8

or matrices saved with numpy or scipy (paths relative to the TOML file)::

    [model]
    h0 = "h0.npy"                  # numpy.save; or a scipy.sparse.save_npz file
    v = "v.npy"
    # or one dense archive:  matrices = "model.npz"   (numpy.savez(path, h0=..., v=...))
    labels = ["g", "e"]            # optional names of the basis states
    dims = [2, 5]                  # optional product-basis sizes
    [model.conserved]              # optional conserved operators (symmetries the coupling graph
    parity = "parity.npz"          #   cannot see): name = matrix file, like h0; each must commute
                                   #   with h0 and v; sectors are their joint eigenspaces

several couplings ``H0 + λ₁ V₁ + λ₂ V₂``: a list of V files (or arrays ``v1``,
``v2`` in the archive), their names, and the point in ``[check]``::

    [model]
    h0 = "h0.npy"
    v = ["v_stark.npy", "v_zeeman.npy"]
    coupling_names = ["E", "B"]    # optional (default λ1, λ2)
    [check]
    couplings = [0.8, 0.3]         # the point (λ₁, λ₂) you use

(a built-in model with two couplings, e.g. ``builtin = "polar_molecule"``,
names its own couplings).

the physical coupling at λ = 1, for display beside λ in reports (any model;
a built-in qubit–resonator model already names its coupling g)::

    [model]
    coupling_scale = 0.066         # the coupling at λ = 1, in coupling_unit
    coupling_unit = "GHz"          # optional
    coupling_name = "g"            # optional

what to check (all optional here; flags can give or override each entry)::

    [check]
    levels = [0, [1, 0], "g"]      # energy ranks, tuple labels as arrays, or string labels
    orders = [2, 4, "pade2/2"]     # every order listed is judged
    coupling = 1.0                 # the coupling λ you use (dimensionless)
    rtol = 0.01                    # or tol = 1e-3 (absolute, energy units); not both
    treatment = "standard"         # "standard" (default) | "nondegenerate" | "block" | "auto"
    backend = "auto"               # exact solver

derived quantities, any number of them (linear combinations of levels)::

    [[quantity]]
    name = "chi"
    expr = "0.5*(1,1) - 0.5*(1,0) - 0.5*(0,1) + 0.5*(0,0)"
    # or: levels = [[1, 1], [1, 0], [0, 1], [0, 0]]  and  weights = [0.5, -0.5, -0.5, 0.5]
    relative_to = "value"          # or "shift": the quantity is presented as its shift E(λ) − E(0)
    units = "GHz"                  #   and its relative error is taken against that shift

    [[quantity]]                   # or a ready-made one from ptcheck.quantities:
    kind = "transition_frequency"  # transition_frequency, stark_shift, dispersive_shift,
    upper = [1, 0]                 # zz_coupling, cross_kerr, anharmonicity, exchange;
    lower = [0, 0]                 # the other keys are that constructor's arguments
    relative_to = "shift"          # accepted with every kind

Level syntax (in files and on the command line): ``3`` is the energy rank 3
(0 = lowest unperturbed level), ``(1,0)`` or ``|1,0⟩`` the label ``(1, 0)`` of
a product basis, anything else a string label such as ``g``.
"""

from __future__ import annotations

import contextlib
import inspect
import re
import tomllib
import zipfile
from collections.abc import Hashable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np
import scipy.sparse as sp

from . import _validation as val
from .approximants import parse_orders
from .model import DENSE_LIMIT, Model, coupling_display
from .models import BUILDERS
from .quantities import Quantity

__all__ = ["ModelFile", "load_model_file", "build_model", "parse_level", "parse_quantity", "SIZE_PARAMS", "MODEL_KINDS", "QUANTITY_KINDS"]

#: Where a model came from.
MODEL_KINDS = ("builtin", "npy", "npz", "sparse-npz")

#: Builder parameters that set a basis truncation (used for truncation checks).
SIZE_PARAMS = ("n_photons", "n_qubit", "n_basis", "n_max", "m_max", "j_max", "n_levels")

_MODEL_KEYS = {"builtin", "name", "params", "h0", "v", "matrices", "labels", "dims", "coupling_names", "conserved",
               "coupling_scale", "coupling_unit", "coupling_name"}
_CHECK_KEYS = {"levels", "orders", "coupling", "couplings", "tol", "rtol", "treatment", "backend"}
_QUANTITY_KEYS = {"name", "expr", "levels", "weights", "relative_to", "units", "kind"}

#: ``kind = ...`` in a ``[[quantity]]`` table -> constructor in ptcheck.quantities.
QUANTITY_KINDS = ("transition_frequency", "stark_shift", "dispersive_shift", "zz_coupling", "cross_kerr",
                  "anharmonicity", "exchange")
_LEVEL_ARGS = ("upper", "lower", "triplet", "singlet")
_TOP_KEYS = {"model", "check", "quantity", "title"}


@dataclass(frozen=True, repr=False, eq=False)
class ModelFile:
    """A model file, read and checked.

    Attributes
    ----------
    path : str
        The file read.
    kind : str
        One of :data:`MODEL_KINDS`.
    model : Model
        The model ``H0 + λ V``.
    builder : str or None
        Name of the built-in builder (``kind == "builtin"``).
    params : mapping
        Builder keyword arguments as given (read-only; empty for matrices).
    levels : tuple
        Level keys from ``[check] levels`` (ranks, tuple or string labels).
    quantities : tuple of Quantity
        From the ``[[quantity]]`` tables.
    orders : tuple
        Order specs (``int`` or ``Pade``); empty if not given.
    coupling : float or None
    couplings : tuple of float or None
        The coupling point ``[λ₁, λ₂, ...]`` of a model with several couplings.
    tol, rtol : float or None
    treatment, backend : str or None
    title : str or None
        Optional report title (top-level ``title = "..."``).
    """

    path: str
    kind: str
    model: Model
    builder: str | None
    params: Mapping[str, Any] = field(default_factory=dict)
    levels: tuple = ()
    quantities: tuple = ()
    orders: tuple = ()
    coupling: float | None = None
    tol: float | None = None
    rtol: float | None = None
    treatment: str | None = None
    backend: str | None = None
    title: str | None = None
    couplings: tuple | None = None

    def __repr__(self) -> str:
        src = self.builder if self.kind == "builtin" else self.kind
        return f"ModelFile({Path(self.path).name!r}, {src}, N={self.model.n}, levels={list(self.levels)})"

    def to_dict(self) -> dict:
        return {
            "path": self.path,
            "kind": self.kind,
            "builder": self.builder,
            "params": _jsonable(dict(self.params)),
            "model_name": self.model.name,
            "n": self.model.n,
            "levels": [_jsonable(k) for k in self.levels],
            "quantities": [quantity_to_dict(q) for q in self.quantities],
            "orders": [str(o) for o in self.orders],
            "coupling": self.coupling,
            "couplings": None if self.couplings is None else list(self.couplings),
            "tol": self.tol,
            "rtol": self.rtol,
            "treatment": self.treatment,
            "backend": self.backend,
            "title": self.title,
        }


def quantity_to_dict(q: Quantity) -> dict:
    """JSON-safe description of a :class:`Quantity`."""
    return {
        "name": q.name,
        "kind": getattr(q, "kind", "combination"),
        "levels": [_jsonable(k) for k in q.weights],
        "weights": [float(w) for w in q.weights.values()],
        "relative_to": q.relative_to,
        "units": q.units,
    }


def _jsonable(x: Any) -> Any:
    if isinstance(x, tuple):
        return [_jsonable(t) for t in x]
    if isinstance(x, dict):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, list):
        return [_jsonable(t) for t in x]
    if isinstance(x, np.generic):
        return x.item()
    return x


# ---------------------------------------------------------------------- levels and quantities
_INT_RE = re.compile(r"^[+-]?\d+$")


def parse_level(token: Any) -> Hashable:
    """A level key from what people type.

    ``3`` / ``"3"`` → rank 3; ``"(1,0)"``, ``"|1,0⟩"``, ``"|1,0>"`` or ``[1, 0]``
    → label ``(1, 0)``; any other string → that string label.

    Examples
    --------
    >>> parse_level("(1, 0)"), parse_level("2"), parse_level("g")
    ((1, 0), 2, 'g')
    """
    if isinstance(token, bool):
        raise TypeError(f"a level must be a rank (int) or a label; got {token!r}")
    if isinstance(token, (int, np.integer)):
        return int(token)
    if isinstance(token, (list, tuple)):
        if not token:
            raise ValueError("a level label cannot be empty: got []")
        return tuple(parse_level(t) if not isinstance(t, str) else _label_part(t) for t in token)
    if isinstance(token, float):
        raise TypeError(f"a level must be a rank (int) or a label; got the float {token!r}")
    if not isinstance(token, str):
        raise TypeError(f"a level must be a rank (int) or a label; got {token!r}")
    s = token.strip()
    if not s:
        raise ValueError("a level cannot be an empty string")
    if _INT_RE.match(s):
        return int(s)
    m = re.match(r"^(?:\((.*)\)|\|(.*?)(?:⟩|>))$", s)
    if m:
        inner = m.group(1) if m.group(1) is not None else m.group(2)
        parts = [p.strip() for p in inner.split(",")]
        if not inner.strip() or any(not p for p in parts):
            raise ValueError(f"cannot read the level label {token!r}; write it like (1,0)")
        return tuple(_label_part(p) for p in parts)
    return s


def _label_part(p: str) -> Hashable:
    p = p.strip()
    return int(p) if _INT_RE.match(p) else p


_TERM_RE = re.compile(
    r"\s*(?P<sign>[+-])?\s*"
    r"(?:(?P<w>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*\*\s*)?"
    r"(?P<lvl>\([^()]*\)|\|[^⟩>]*(?:⟩|>)|[A-Za-z_][\w.]*|\d+)\s*"
)


def parse_quantity(text: str, *, name: str | None = None, relative_to: str = "value", units: str = "") -> Quantity:
    """A :class:`Quantity` from ``"name = w1*level1 + w2*level2 ..."``.

    Parameters
    ----------
    text : str
        ``"f01 = (1,0) - (0,0)"``; the ``name =`` part may be left out when
        ``name`` is given.  Weights are plain decimal numbers followed by ``*``;
        a term without a weight has weight ±1.
    name : str, optional
        Name (when ``text`` has no ``name =`` part).
    relative_to, units : str
        Passed to :class:`Quantity`.

    Examples
    --------
    >>> q = parse_quantity("chi = 0.5*(1,1) - 0.5*(1,0) - 0.5*(0,1) + 0.5*(0,0)")
    >>> q.name, q.weights[(1, 1)]
    ('chi', 0.5)
    """
    if not isinstance(text, str):
        raise TypeError(f"a quantity must be a string like 'f01 = (1,0) - (0,0)'; got {text!r}")
    expr = text
    if "=" in text:
        nm, expr = text.split("=", 1)
        nm = nm.strip()
        if not nm:
            raise ValueError(f"quantity {text!r} has an empty name before '='")
        name = nm
    if not name:
        raise ValueError(f"quantity {text!r} needs a name: write it like 'f01 = (1,0) - (0,0)'")
    weights: dict[Hashable, float] = {}
    pos = 0
    expr = expr.strip()
    first = True
    if not expr:
        raise ValueError(f"quantity {text!r} has no terms")
    while pos < len(expr):
        m = _TERM_RE.match(expr, pos)
        if not m or m.end() == pos or (not first and m.group("sign") is None):
            raise ValueError(
                f"cannot read quantity {text!r} near {expr[pos:pos + 12]!r}; write terms like '0.5*(1,0) - (0,0)'"
            )
        w = float(m.group("w")) if m.group("w") else 1.0
        if m.group("sign") == "-":
            w = -w
        key = parse_level(m.group("lvl"))
        weights[key] = weights.get(key, 0.0) + w
        pos = m.end()
        first = False
    return Quantity(name, weights, units=units, relative_to=relative_to)


# ---------------------------------------------------------------------- loading
def load_model_file(path: str | Path) -> ModelFile:
    """Read a model file (TOML, or a dense ``.npz`` archive with arrays ``h0`` and ``v``).

    Parameters
    ----------
    path : str or Path
        A ``.toml`` file following the schema in this module's docstring, or
        an ``.npz`` written by ``numpy.savez(path, h0=..., v=...)``.

    Returns
    -------
    ModelFile

    Raises
    ------
    FileNotFoundError
        The file (or a matrix file it names) does not exist.
    ValueError
        Malformed TOML, unknown keys or model names, bad matrices (the message
        names the file and the problem).
    """
    p = Path(path)
    if not p.exists():
        raise FileNotFoundError(f"model file {str(p)!r} does not exist")
    if p.is_dir():
        raise IsADirectoryError(f"model file {str(p)!r} is a directory")
    if p.suffix.lower() == ".npz":
        model, kind = _model_from_matrices({"matrices": p.name}, p.parent, p)
        return ModelFile(path=str(p), kind=kind, model=model, builder=None, params=MappingProxyType({}))
    try:
        with open(p, "rb") as fh:
            doc = tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise ValueError(f"{p}: not valid TOML ({exc})") from None
    except UnicodeDecodeError:
        raise ValueError(f"{p}: not a text (TOML) file") from None
    return _from_document(doc, p)


def _where(p: Path, what: str) -> str:
    return f"{p}: {what}"


def _check_keys(table: Any, allowed: set[str], where: str) -> dict:
    if not isinstance(table, dict):
        raise ValueError(f"{where} must be a table; got {table!r}")
    unknown = sorted(set(table) - allowed)
    if unknown:
        raise ValueError(f"{where} has unknown key(s) {', '.join(map(repr, unknown))}; allowed: {', '.join(sorted(allowed))}")
    return table


def _from_document(doc: dict, p: Path) -> ModelFile:
    _check_keys(doc, _TOP_KEYS, _where(p, "the file"))
    if "model" not in doc:
        raise ValueError(_where(p, "no [model] table: name a built-in model (builtin = ...) or matrix files (h0/v or matrices)"))
    mt = _check_keys(doc["model"], _MODEL_KEYS, _where(p, "[model]"))
    title = doc.get("title")
    if title is not None and not isinstance(title, str):
        raise ValueError(_where(p, f"title must be a string; got {title!r}"))

    params: dict = {}
    builder = None
    if "builtin" in mt:
        extra = sorted(set(mt) & {"h0", "v", "matrices", "labels", "dims", "conserved"})
        if extra:
            raise ValueError(_where(p, f"[model] names a built-in model and also {', '.join(extra)}; give one or the other"))
        builder = mt["builtin"]
        if not isinstance(builder, str) or builder not in BUILDERS:
            raise ValueError(_where(p, f"unknown built-in model {builder!r}; known: {', '.join(sorted(BUILDERS))}"))
        params = mt.get("params", {})
        if not isinstance(params, dict):
            raise ValueError(_where(p, f"[model.params] must be a table of builder arguments; got {params!r}"))
        model = build_model(builder, params, where=str(p))
        kind = "builtin"
        if "coupling_names" in mt:
            raise ValueError(_where(p, "[model] coupling_names is for matrices; a built-in model names its couplings"))
    else:
        if "params" in mt:
            raise ValueError(_where(p, "[model.params] is only for built-in models (builtin = ...)"))
        model, kind = _model_from_matrices(mt, p.parent, p)
    if isinstance(mt.get("name"), str):
        model.name = mt["name"]
    elif "name" in mt:
        raise ValueError(_where(p, f"[model] name must be a string; got {mt['name']!r}"))
    _set_coupling_display(model, mt, p)

    ct = _check_keys(doc.get("check", {}), _CHECK_KEYS, _where(p, "[check]"))
    try:
        levels = tuple(parse_level(k) for k in _as_list(ct.get("levels", []), "levels"))
        orders = parse_orders(_as_list(ct["orders"], "orders")) if "orders" in ct else ()
        coupling = _number(ct.get("coupling"), "coupling")
        couplings = _coupling_point(ct.get("couplings"), model, coupling)
        tol = _number(ct.get("tol"), "tol")
        rtol = _number(ct.get("rtol"), "rtol")
        if tol is not None and rtol is not None:
            raise ValueError(f"give tol or rtol, not both; got tol={tol!r}, rtol={rtol!r}")
        treatment = _string(ct.get("treatment"), "treatment")
        backend = _string(ct.get("backend"), "backend")
        qts = doc.get("quantity", [])
        if isinstance(qts, dict):
            qts = [qts]
        if not isinstance(qts, list):
            raise ValueError(f"[[quantity]] must be an array of tables; got {qts!r}")
        quantities = tuple(_quantity(q, i) for i, q in enumerate(qts))
        names = [q.name for q in quantities]
        if len(set(names)) != len(names):
            raise ValueError(f"quantity names must be distinct; got {names}")
        # resolve every level now, so that a bad label is reported against the file
        for k in levels:
            model.level_index(k)
        for q in quantities:
            q.resolve(model)
    except (ValueError, TypeError) as exc:
        raise ValueError(_where(p, str(exc))) from None
    return ModelFile(
        path=str(p), kind=kind, model=model, builder=builder, params=MappingProxyType(dict(params)),
        levels=levels, quantities=quantities, orders=orders, coupling=coupling, tol=tol, rtol=rtol,
        treatment=treatment, backend=backend, title=title, couplings=couplings,
    )


def _set_coupling_display(model: Model, mt: dict, p: Path) -> None:
    """``coupling_scale`` / ``coupling_unit`` / ``coupling_name`` of [model] (they override a builder's)."""
    keys = ("coupling_scale", "coupling_unit", "coupling_name")
    if not any(k in mt for k in keys):
        return
    given = [mt.get(k, getattr(model, k)) for k in keys]
    if "coupling_scale" in mt and isinstance(given[0], bool):
        raise ValueError(_where(p, f"[model] coupling_scale must be a number; got {given[0]!r}"))
    try:
        model.coupling_scale, model.coupling_unit, model.coupling_name = coupling_display(*given)
    except (ValueError, TypeError) as exc:
        raise ValueError(_where(p, f"[model] {exc}")) from None


def _coupling_point(x: Any, model: Model, coupling: float | None) -> tuple | None:
    """``couplings = [λ₁, λ₂]`` of a model with several couplings (one number per coupling)."""
    m = model.n_couplings
    if x is None:
        if m > 1 and coupling is not None:
            raise ValueError(
                f"the model has {m} couplings ({', '.join(model.coupling_names)}): give the point as "
                f"couplings = [{', '.join('λ' + str(i + 1) for i in range(m))}], not coupling = {coupling!r}"
            )
        return None
    if m == 1:
        raise ValueError(f"couplings = {x!r} is for models with several couplings; this model has one: use coupling = λ")
    if not isinstance(x, list) or len(x) != m:
        raise ValueError(f"couplings must be a list of {m} numbers, one per coupling ({', '.join(model.coupling_names)}); got {x!r}")
    return tuple(_number(v, "couplings entry") for v in x)


def build_model(builder: str, params: Mapping[str, Any], *, where: str = "") -> Model:
    """Call a built-in builder with keyword ``params``; unknown names give a clear error."""
    prefix = f"{where}: " if where else ""
    if builder not in BUILDERS:
        raise ValueError(f"{prefix}unknown built-in model {builder!r}; known: {', '.join(sorted(BUILDERS))}")
    fn = BUILDERS[builder]
    names = [n for n in inspect.signature(fn).parameters]
    unknown = sorted(set(params) - set(names))
    if unknown:
        raise ValueError(f"{prefix}{builder} has no parameter(s) {', '.join(map(repr, unknown))}; its parameters are {', '.join(names)}")
    try:
        return fn(**params)
    except (ValueError, TypeError) as exc:
        raise ValueError(f"{prefix}{builder}: {exc}") from None


def _as_list(x: Any, name: str) -> list:
    if isinstance(x, list):
        return x
    if isinstance(x, (int, str)) and not isinstance(x, bool):
        return [x]
    raise TypeError(f"{name} must be a list; got {x!r}")


def _number(x: Any, name: str) -> float | None:
    if x is None:
        return None
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        raise TypeError(f"{name} must be a number; got {x!r}")
    return float(x)


def _string(x: Any, name: str) -> str | None:
    if x is None:
        return None
    if not isinstance(x, str):
        raise TypeError(f"{name} must be a string; got {x!r}")
    return x


def _quantity(q: Any, i: int) -> Quantity:
    where = f"[[quantity]] #{i + 1}"
    if not isinstance(q, dict):
        raise ValueError(f"{where} must be a table; got {q!r}")
    if "kind" in q:
        return _quantity_of_kind(q, where)
    unknown = sorted(set(q) - _QUANTITY_KEYS)
    if unknown:
        raise ValueError(f"{where} has unknown key(s) {', '.join(map(repr, unknown))}; allowed: {', '.join(sorted(_QUANTITY_KEYS))}")
    name = q.get("name")
    if not isinstance(name, str) or not name:
        raise ValueError(f"{where} needs a name (a non-empty string); got {name!r}")
    rel = q.get("relative_to", "value")
    units = q.get("units", "")
    if "expr" in q:
        if "levels" in q or "weights" in q:
            raise ValueError(f"quantity {name!r}: give expr or levels/weights, not both")
        parsed = parse_quantity(q["expr"], name=name, relative_to=rel, units=units)
        return Quantity(name, dict(parsed.weights), units=units, relative_to=rel)  # the table's name wins
    if "levels" not in q or "weights" not in q:
        raise ValueError(f"quantity {name!r} needs expr = '...' or both levels = [...] and weights = [...]")
    lv, ws = _as_list(q["levels"], "levels"), _as_list(q["weights"], "weights")
    if len(lv) != len(ws):
        raise ValueError(f"quantity {name!r}: levels and weights differ in length ({len(lv)} vs {len(ws)})")
    weights: dict[Hashable, float] = {}
    for k, w in zip(lv, ws):
        key = parse_level(k)
        weights[key] = weights.get(key, 0.0) + float(_number(w, f"quantity {name!r} weight"))
    return Quantity(name, weights, units=units, relative_to=rel)


def _quantity_of_kind(q: dict, where: str) -> Quantity:
    """``kind = "dispersive_shift"`` etc.: call the constructor of ptcheck.quantities with the other keys."""
    from . import quantities

    kind = q["kind"]
    if kind not in QUANTITY_KINDS:
        raise ValueError(f"{where}: unknown kind {kind!r}; known: {', '.join(QUANTITY_KINDS)} (or use expr = '...')")
    fn = getattr(quantities, kind)
    names = [n for n in inspect.signature(fn).parameters if n not in ("closed_form", "closed_form_order")]
    args = {k: v for k, v in q.items() if k != "kind"}
    # relative_to is accepted with every kind (stark_shift has it fixed to "shift"; asking for it is harmless)
    rel = args.pop("relative_to", None) if "relative_to" not in names else None
    unknown = sorted(set(args) - set(names))
    if unknown:
        raise ValueError(
            f"{where}: {kind} has no argument(s) {', '.join(map(repr, unknown))}; its arguments are "
            f"{', '.join(names + ([] if 'relative_to' in names else ['relative_to']))}"
        )
    for k in _LEVEL_ARGS:
        if k in args:
            args[k] = parse_level(args[k])
    if isinstance(args.get("axes"), list):
        args["axes"] = tuple(args["axes"])
    out = fn(**args)
    if rel is not None and rel != out.relative_to:
        from dataclasses import replace as _replace

        if not isinstance(rel, str):
            raise TypeError(f"{where}: relative_to must be \"value\" or \"shift\"; got {rel!r}")
        out = _replace(out, relative_to=rel)
    return out


#: What reading a damaged or foreign file can raise (numpy, scipy, zipfile).
_READ_ERRORS = (OSError, EOFError, ValueError, KeyError, zipfile.BadZipFile)


@contextlib.contextmanager
def _reading(path: Path, what: str, source: Path) -> Iterator[None]:
    """Turn any failure to read ``path`` into one clear ValueError naming the file."""
    try:
        yield
    except _READ_ERRORS as exc:
        raise ValueError(
            f"{source}: cannot read {what} from {path}: not a readable {path.suffix or 'numpy'} file "
            f"({type(exc).__name__}: {exc})"
        ) from None


def _npy_header(fh: Any) -> tuple[tuple, int] | None:
    """Shape and item size from the header of an .npy stream (None for a header version not peeked at)."""
    version = np.lib.format.read_magic(fh)
    if version == (1, 0):
        shape, _, dtype = np.lib.format.read_array_header_1_0(fh)
    elif version == (2, 0):
        shape, _, dtype = np.lib.format.read_array_header_2_0(fh)
    else:
        return None
    return tuple(int(k) for k in shape), int(dtype.itemsize)


def _sized(source: Path, check: Any, *args: Any, **kwargs: Any) -> None:
    """Run a size check; its message is prefixed with the model file."""
    try:
        check(*args, **kwargs)
    except ValueError as exc:
        raise ValueError(f"{source}: {exc}") from None


def _check_dense_header(head: tuple[tuple, int] | None, name: str, source: Path) -> None:
    """Refuse a dense array too large for ptcheck from its header, before it is read."""
    if head is not None and len(head[0]) == 2:
        _sized(source, val.check_matrix_size, head[0], name, dense=True, max_dense=DENSE_LIMIT, itemsize=head[1])


def _load_matrix(path: Path, name: str, source: Path) -> tuple[Any, str]:
    if not path.exists():
        raise FileNotFoundError(f"{source}: matrix file {str(path)!r} ({name}) does not exist")
    if path.is_dir():
        raise ValueError(f"{source}: matrix file {str(path)!r} ({name}) is a folder")
    suffix = path.suffix.lower()
    what = f"{name} ({path.name})"
    if suffix == ".npy":
        with _reading(path, name, source), open(path, "rb") as fh:
            head = _npy_header(fh)
        _check_dense_header(head, what, source)
        with _reading(path, name, source):
            return np.load(path, allow_pickle=False), "npy"
    if suffix == ".npz":
        shape, nnz = None, None
        with _reading(path, name, source), zipfile.ZipFile(path) as zf:
            members = set(zf.namelist())
            if {"format.npy", "shape.npy"} <= members:
                with zf.open("shape.npy") as fh:
                    shape = tuple(int(k) for k in np.lib.format.read_array(fh, allow_pickle=False))
                if "data.npy" in members:
                    with zf.open("data.npy") as fh:
                        head = _npy_header(fh)
                    nnz = None if head is None else int(np.prod(head[0]))
        if shape is None:
            raise ValueError(
                f"{source}: {path} is not a scipy.sparse .npz (scipy.sparse.save_npz); for dense arrays use .npy "
                "files or one archive with `matrices = ...` holding h0 and v"
            )
        _sized(source, val.check_matrix_size, shape, what, dense=False)
        if nnz is not None and nnz > val.MAX_NONZEROS:
            raise ValueError(f"{source}: {what} has {nnz} stored entries; ptcheck accepts at most {val.MAX_NONZEROS}")
        with _reading(path, name, source):
            return sp.load_npz(path), "sparse-npz"
    raise ValueError(f"{source}: {name} file {path.name!r} must end in .npy (numpy.save) or .npz (scipy.sparse.save_npz)")


def _load_archive(arch: Path, source: Path) -> tuple[Any, Any]:
    """h0 and v from one dense numpy.savez archive (sizes checked from the headers first)."""
    with _reading(arch, "the matrices", source), zipfile.ZipFile(arch) as zf:
        members = {m[:-4] if m.endswith(".npy") else m for m in zf.namelist()}
        heads = {}
        several = sorted((m for m in members if re.fullmatch(r"v\d+", m)), key=lambda m: int(m[1:]))
        for key in ("h0", "v", *several):
            if key in members:
                with zf.open(f"{key}.npy") as fh:
                    heads[key] = _npy_header(fh)
    if {"format", "shape"} <= members:
        raise ValueError(
            f"{source}: {arch} is a single scipy.sparse matrix; save h0 and v separately with "
            "scipy.sparse.save_npz and name them with h0 = ... and v = ..."
        )
    if "v" not in members and several:
        members = members | {"v"}
    missing = sorted({"h0", "v"} - members)
    if missing:
        raise ValueError(f"{source}: {arch} has no array(s) {', '.join(missing)} (it has "
                         f"{', '.join(sorted(members)) or 'none'}); write it with numpy.savez(path, h0=..., v=...)")
    for key, head in heads.items():
        _check_dense_header(head, f"{key} ({arch.name})", source)
    with _reading(arch, "the matrices", source), np.load(arch, allow_pickle=False) as z:
        if "v" not in z.files:  # several couplings: arrays v1, v2, ...
            return z["h0"], [z[k] for k in several]
        return z["h0"], z["v"]


def _model_from_matrices(mt: dict, base: Path, source: Path) -> tuple[Model, str]:
    if "matrices" in mt:
        if "h0" in mt or "v" in mt:
            raise ValueError(_where(source, "[model] gives matrices = ... and h0/v; give one or the other"))
        arch = base / str(mt["matrices"])
        if not arch.exists():
            raise FileNotFoundError(f"{source}: matrix archive {str(arch)!r} does not exist")
        h0, v = _load_archive(arch, source)
        kind = "npz"
    elif "h0" in mt and "v" in mt:
        h0, k0 = _load_matrix(base / str(mt["h0"]), "h0", source)
        if isinstance(mt["v"], list):  # several couplings: one matrix file per V_i
            if len(mt["v"]) < 1:
                raise ValueError(_where(source, "[model] v = [] names no matrix"))
            loaded = [_load_matrix(base / str(f), f"v[{i}]", source) for i, f in enumerate(mt["v"])]
            v = [x for x, _ in loaded] if len(loaded) > 1 else loaded[0][0]
            kinds = [k for _, k in loaded]
        else:
            v, k1 = _load_matrix(base / str(mt["v"]), "v", source)
            kinds = [k1]
        kind = "sparse-npz" if "sparse-npz" in (k0, *kinds) else "npy"
    else:
        raise ValueError(_where(source, "[model] needs builtin = ..., or h0 = ... and v = ..., or matrices = ..."))
    labels = mt.get("labels")
    if labels is not None:
        labels = [parse_level(x) if not isinstance(x, str) else x for x in _as_list(labels, "labels")]
    dims = mt.get("dims")
    conserved = mt.get("conserved")
    if conserved is not None:
        if not isinstance(conserved, dict) or not conserved:
            raise ValueError(_where(source, f"[model.conserved] must be a table name = \"matrix file\"; got {conserved!r}"))
        ops = {}
        for nm, path in conserved.items():
            if not isinstance(path, str):
                raise ValueError(_where(source, f"[model.conserved] {nm} must be a matrix file name (.npy or .npz); got {path!r}"))
            ops[nm] = _load_matrix(base / path, f"conserved operator {nm!r}", source)[0]
        conserved = ops
    names = mt.get("coupling_names")
    if names is not None and not (isinstance(names, list) and all(isinstance(x, str) for x in names)):
        raise ValueError(_where(source, f"[model] coupling_names must be a list of strings; got {names!r}"))
    try:
        model = Model(h0, v, labels=labels, dims=dims, name=source.stem, names=names, conserved=conserved)
    except (ValueError, TypeError) as exc:
        raise ValueError(_where(source, str(exc))) from None
    return model, kind
