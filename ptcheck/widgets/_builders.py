"""Model box: parse the parameter text, build a built-in model, explain failures in plain words (private)."""

from __future__ import annotations

import ast
import inspect
from typing import Any

from ..model import Model
from ..models import BUILDERS

__all__ = ["parse_params", "builder_defaults", "format_params", "build_model"]


def parse_params(text: str) -> dict:
    """``"g=0.1, n_photons=8"`` -> ``{"g": 0.1, "n_photons": 8}`` (Python literals only).

    Raises
    ------
    ValueError
        With a plain sentence that quotes what was typed.
    """
    text = (text or "").strip()
    if not text:
        return {}
    try:
        call = ast.parse(f"f({text})", mode="eval").body
    except SyntaxError:
        raise ValueError(f"model parameters must look like 'g=0.1, n_photons=8'; got {text!r}") from None
    if not isinstance(call, ast.Call) or call.args:
        raise ValueError(f"model parameters must be name=value pairs separated by commas; got {text!r}")
    out = {}
    for kw in call.keywords:
        if kw.arg is None:
            raise ValueError(f"model parameters must be name=value pairs separated by commas; got {text!r}")
        try:
            out[kw.arg] = ast.literal_eval(kw.value)
        except ValueError:
            typed = ast.unparse(kw.value)
            raise ValueError(
                f"model parameter {kw.arg} must be a number, True/False or a quoted text; got {typed} "
                f"(write {kw.arg}=5 for a number or {kw.arg}='{typed}' for a text)"
            ) from None
    return out


def builder_defaults(name: str) -> dict:
    """Keyword parameters of a built-in builder with their defaults (those with a literal default)."""
    out = {}
    for p in inspect.signature(BUILDERS[name]).parameters.values():
        if p.kind is inspect.Parameter.KEYWORD_ONLY and p.default is not inspect.Parameter.empty and p.default is not None:
            if isinstance(p.default, (int, float, str, bool)):
                out[p.name] = p.default
    return out


def _param_names(name: str) -> list[str]:
    return [p.name for p in inspect.signature(BUILDERS[name]).parameters.values()
            if p.kind in (inspect.Parameter.KEYWORD_ONLY, inspect.Parameter.POSITIONAL_OR_KEYWORD)]


def format_params(params: dict) -> str:
    """``{"g": 0.1}`` -> ``"g=0.1"`` (the text the parameter box shows)."""
    return ", ".join(f"{k}={v!r}" for k, v in params.items())


def build_model(name: str, params: dict) -> Model:
    """Build a built-in model; any failure becomes a ValueError in plain words listing the valid parameters."""
    if name not in BUILDERS:
        raise ValueError(f"unknown model {name!r}; the built-in models are {', '.join(sorted(BUILDERS))}")
    valid = _param_names(name)
    listing = ", ".join(valid)
    unknown = [k for k in params if k not in valid]
    if unknown:
        few = ", ".join(unknown)
        raise ValueError(f"{name} has no parameter{'s' if len(unknown) > 1 else ''} {few}; its parameters are {listing}")
    try:
        return BUILDERS[name](**params)
    except (ValueError, TypeError) as exc:
        raise ValueError(f"{name}({format_params(params)}) cannot be built: {exc} (its parameters are {listing})") from exc
