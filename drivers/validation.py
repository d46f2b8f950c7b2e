"""A pydantic validation error as the lines heft prints: ``field path: what was expected (got X)``.

Every place that validates input with pydantic (station config, driver and serial options, USB
fixtures and ports, recordings, simulator definitions, MQTT commands, the calc parts file) turns
its ``ValidationError`` into words here, so a bad value reads the same wherever it was typed.

Given the schema that was validated, the path is written the way the input is written: list
indexes as ``[i]``, the tag of a tagged union (``geometry.two_support.x``) and pydantic's
validator wrappers left out, and an unknown key gets the nearest valid name or the list of them.
"""

from __future__ import annotations

import difflib
import types
from collections.abc import Mapping, Sequence
from collections.abc import Set as AbstractSet
from typing import Annotated, Any, Literal, Union, get_args, get_origin

from pydantic import BaseModel, ValidationError
from pydantic_core import ErrorDetails

# Longer inputs are cut in the "(got X)" part: the path already says where to look.
_GOT_MAX_CHARS = 60
_MESSAGE_PREFIXES = ("Value error, ", "Assertion failed, ")
# A value under a key named like these is a secret: shown as *** whatever its type.
_SECRET_WORDS = ("password", "passwd", "secret", "token", "passphrase", "key_hex")
SECRET_MASK = "***"


def is_secret_key(key: object) -> bool:
    """True for a field whose value must never be printed (a password, a key, a token)."""
    return isinstance(key, str) and any(word in key.lower() for word in _SECRET_WORDS)


class FieldProblems(ValueError):
    """Raised inside a model validator for cross-field problems that know their own paths;
    each (path, message) becomes one line."""

    def __init__(self, problems: Sequence[tuple[str, str]]) -> None:
        super().__init__("; ".join(f"{path}: {message}" for path, message in problems))
        self.problems = list(problems)


def problem_lines(
    err: ValidationError,
    schema: Any,
    *,
    noun: str = "field",
    top: str = "(top level)",
    show_tags: bool = False,
    toml_paths: bool = False,
    first_only: bool = False,
) -> list[str]:
    """One ``path: expected (got X)`` line per problem, unknown keys first.

    Args:
        err: what pydantic raised.
        schema: the model or type that was validated (a tagged-union annotation for a
            ``TypeAdapter``); it names the valid keys beside an unknown one.
        noun: what a key is called in "unknown field" ("option" for driver options).
        top: the path written for a problem with the input as a whole.
        show_tags: keep a tagged union's tag in the path (``calibrate_span.mass_g``).
        toml_paths: name keys as a TOML file writes them: ``shaft.mass``, ``[[extra]] #1 at``,
            an unknown key as ``[grip]: unknown key 'weigth'`` (at the top level without a
            table), a value that is not a table as "must be a table".
        first_only: only the first line (callers that report one problem).
    """
    lines: list[str] = []
    # An unknown key first: a misspelt key is usually also why a required one is "missing".
    for e in sorted(err.errors(), key=lambda e: e["type"] != "extra_forbidden"):
        ctx_err = e.get("ctx", {}).get("error")
        if isinstance(ctx_err, FieldProblems):
            lines.extend(f"{path}: {message}" for path, message in ctx_err.problems)
        else:
            lines.append(_line(e, schema, noun, top, show_tags, toml_paths))
        if first_only:
            return lines[:1]
    return lines


def _line(
    e: ErrorDetails, schema: Any, noun: str, top: str, show_tags: bool, toml_paths: bool
) -> str:
    keys, holder, at = _walk(schema, tuple(e["loc"]), show_tags)
    kind = e["type"]
    if toml_paths and kind == "extra_forbidden":
        # TOML names a table by its header: the unknown key is named inside it.
        hint = _unknown(str(keys[-1]), _fields_of(holder), noun).partition(";")[2]
        table = _toml_table(keys[:-1])
        return f"{table + ': ' if table else ''}unknown {noun} {str(keys[-1])!r};{hint}"
    path = _toml_path(keys) if toml_paths else _dotted(keys)
    if toml_paths and kind == "model_type":
        return f"{path or top}: {_with_got('must be a table', e)}"
    return f"{path or top}: {_expected(e, holder, at, noun)}"


def _expected(e: ErrorDetails, holder: Any, at: Any, noun: str) -> str:
    kind = e["type"]
    if kind == "missing":
        return "is required"
    if kind == "extra_forbidden":
        return _unknown(str(e["loc"][-1]), _fields_of(holder), noun)
    ctx = e.get("ctx", {})
    if kind in ("union_tag_invalid", "union_tag_not_found"):
        key = str(ctx.get("discriminator", "")).strip("'")
        tags = _tags_of(at, key) or [str(ctx.get("expected_tags", ""))]
        text = f"{key!r} must be one of {', '.join(t.replace(chr(39), '') for t in tags)}"
        return text + (f" (got {ctx['tag']!r})" if "tag" in ctx else "")
    msg = str(e["msg"])
    for prefix in _MESSAGE_PREFIXES:
        msg = msg.removeprefix(prefix)
    return _with_got(msg, e)


def _with_got(msg: str, e: ErrorDetails) -> str:
    """``msg (got X)``, unless X is the whole input or a table, or the message quotes it."""
    got = e.get("input")
    if not e["loc"] or isinstance(got, dict | list | tuple | BaseModel):
        return msg  # the path says which
    shown = SECRET_MASK if any(is_secret_key(k) for k in e["loc"]) else repr(got)
    if e["type"] in ("value_error", "assertion_error") and shown in msg:
        return msg  # heft's own validator already quotes it
    if len(shown) > _GOT_MAX_CHARS:
        shown = shown[: _GOT_MAX_CHARS - 3] + "..."
    return f"{msg} (got {shown})"


def _unknown(typed: str, known: list[str], noun: str) -> str:
    """'unknown field', with the nearest known name (difflib) or the known names."""
    near = difflib.get_close_matches(typed, known, n=1, cutoff=0.6)
    if near:
        return f"unknown {noun}; did you mean {near[0]!r}?"
    if known:
        return f"unknown {noun}; expected one of {', '.join(sorted(known))}"
    return f"unknown {noun}; there are none here"


def _walk(
    schema: Any, loc: tuple[int | str, ...], show_tags: bool
) -> tuple[list[int | str], Any, Any]:
    """The keys and indexes of the path as written in the input; the type holding its last key
    (it names the valid keys beside an unknown one); the type at the end of the path. Follows
    the schema beside the path to know which items are tagged-union tags or union member
    labels rather than keys."""
    keys: list[int | str] = []
    tp: Any = schema
    holder: Any = None
    for item in loc:
        if isinstance(item, str) and item.startswith("function-"):
            continue  # a BeforeValidator/AfterValidator wrapper, not a key
        tp, kind = _pick_member(tp, item)
        if kind is None:
            holder, tp = tp, _child(tp, item)
        if kind == "label" or (kind == "tag" and not show_tags):
            continue  # a plain union names the member it tried ("float", "str")
        keys.append(item)
    return keys, holder, tp


def _dotted(keys: Sequence[int | str]) -> str:
    """``devices[0].serial.parity``."""
    text = ""
    for key in keys:
        text += f"[{key}]" if isinstance(key, int) else f".{key}" if text else str(key)
    return text


def _toml_path(keys: Sequence[int | str]) -> str:
    """``shaft.mass``; inside an array of tables ``[[extra]] #1 at`` (counted from 1)."""
    for i, key in enumerate(keys):
        if isinstance(key, int):
            rest = _dotted(keys[i + 1 :])
            head = f"[[{_dotted(keys[:i])}]] #{key + 1}"
            return f"{head} {rest}" if rest else head
    return _dotted(keys)


def _toml_table(keys: Sequence[int | str]) -> str:
    """The header of the table at ``keys``: ``[grip]``, ``[[extra]] #1``; empty at the top."""
    if not keys or isinstance(keys[-1], int):
        return _toml_path(keys)
    return f"[{_toml_path(keys)}]"


def _child(tp: Any, item: int | str) -> Any:
    """The type of key or index ``item`` inside ``tp`` (None when the schema does not say)."""
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        field = tp.model_fields.get(str(item))
        return None if field is None else field.annotation
    origin, args = get_origin(tp), get_args(tp)
    if isinstance(origin, type) and issubclass(origin, Mapping) and len(args) == 2:
        return args[1]
    if isinstance(origin, type) and issubclass(origin, Sequence | AbstractSet) and args:
        return args[0]
    return None


def _pick_member(tp: Any, item: int | str | None) -> tuple[Any, str | None]:
    """Strip Annotated and Optional; for a union, the member ``item`` names.

    Returns the type and what ``item`` was: "tag" (a tagged union's tag), "label" (a plain
    union's member label), or None (a key, to look up in the type).
    """
    while get_origin(tp) is Annotated:
        tp = get_args(tp)[0]
    if not _is_union(tp):
        return tp, None
    members = [a for a in get_args(tp) if a is not type(None)]
    if len(members) == 1:
        return _pick_member(members[0], item)
    for m in members:
        if isinstance(m, type) and issubclass(m, BaseModel) and item in _literal_values(m):
            return m, "tag"
    for m in members:
        if isinstance(item, str) and item in (getattr(m, "__name__", None), str(m)):
            return m, "label"
    return tp, None


def _literal_values(model: type[BaseModel]) -> set[object]:
    values: set[object] = set()
    for field in model.model_fields.values():
        if get_origin(field.annotation) is Literal:
            values.update(get_args(field.annotation))
    return values


def _tags_of(tp: Any, key: str) -> list[str]:
    """The valid tags of a tagged union whose discriminator field is ``key``."""
    while get_origin(tp) is Annotated:
        tp = get_args(tp)[0]
    tags: list[str] = []
    for m in get_args(tp) if _is_union(tp) else ():
        if isinstance(m, type) and issubclass(m, BaseModel) and key in m.model_fields:
            tags += [str(v) for v in get_args(m.model_fields[key].annotation)]
    return tags


def _fields_of(tp: Any) -> list[str]:
    return list(tp.model_fields) if isinstance(tp, type) and issubclass(tp, BaseModel) else []


def _is_union(tp: Any) -> bool:
    return get_origin(tp) in (Union, types.UnionType)
