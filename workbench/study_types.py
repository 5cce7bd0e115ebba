"""Type checks for study-file values, with messages naming the key, the expected type and the value.

TOML has its own types (text, whole numbers, decimals, true/false, lists, tables);
a value of the wrong one (``replicates = "five"``, ``seed = "twenty"``,
``screen = "yes"``) is refused here, before anything is computed, instead of
failing later inside the analysis. The expected type of each key is read from the
annotation of the dataclass field it fills.
"""

from __future__ import annotations

import types
import typing

from workbench.errors import SpecError

CODE_LIKE = frozenset({"levels", "reference", "event_codes", "censor_codes", "competing_codes"})
"""Keys holding category codes or levels: numbers are accepted and compared as text."""

_TOML_NAMES = {str: "text", bool: "true/false", int: "a whole number", float: "a decimal number",
               list: "a list", tuple: "a list", dict: "a table"}

_EXAMPLES = {int: "a whole number, such as 5", float: "a number, such as 0.5", bool: "true or false",
             str: "text in quotes, such as \"name\""}


def _found(value) -> str:
    kind = next((name for t, name in _TOML_NAMES.items() if isinstance(value, t)), type(value).__name__)
    return f"{value!r} ({kind})"


def _is(value, t, code_like: bool) -> bool:
    if t is bool:
        return isinstance(value, bool)
    if t is int:
        return isinstance(value, int) and not isinstance(value, bool)
    if t is float:
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    if t is str:
        return isinstance(value, str) or (code_like and isinstance(value, (int, float)) and not isinstance(value, bool))
    return True  # nested tables and other types are checked where they are built


def _describe(options, code_like: bool) -> str:
    parts = []
    for t in options:
        origin = typing.get_origin(t)
        if origin is tuple:
            inner = typing.get_args(t)[0]
            plural = {str: "text values", int: "whole numbers", float: "numbers", bool: "true/false values"}
            what = "text values or numbers" if (inner is str and code_like) else plural.get(inner, "values")
            example = "[12, 24]" if inner in (int, float) else '["a", "b"]'
            parts.append(f"a list of {what}, such as {example}")
        elif t is str and code_like:
            parts.append("text or a number")
        else:
            parts.append(_EXAMPLES.get(t, getattr(t, "__name__", str(t))))
    return " or ".join(parts)


def check_value(where: str, key: str, value, annotation) -> None:
    """Raise :class:`SpecError` if ``value`` (as read from TOML) does not fit ``annotation``."""
    code_like = key in CODE_LIKE
    args = typing.get_args(annotation) if isinstance(annotation, types.UnionType) else (annotation,)
    options = [a for a in args if a is not type(None)]
    for t in options:
        if typing.get_origin(t) is tuple:
            inner = typing.get_args(t)[0]
            if isinstance(value, (list, tuple)) and all(_is(v, inner, code_like) for v in value):
                return
        elif _is(value, t, code_like):
            return
    if value is None and len(options) < len(args):
        return
    raise SpecError(f"{where}: {key} must be {_describe(options, code_like)}; found {_found(value)}.")


def field_types(cls) -> dict:
    """Resolved annotations of a dataclass's fields."""
    return typing.get_type_hints(cls)
