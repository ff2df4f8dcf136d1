"""Config errors in the user's words: pydantic's validation errors as ``path must ...; got ...``."""

from __future__ import annotations

import re
import typing

from pydantic import BaseModel, ValidationError

from .schema import Config, suggest

__all__ = ["messages"]


def _loc(loc: tuple) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif part in ("float", "list[float]", "int", "list[constrained-float]", "constrained-float") \
                or part.startswith(("list[", "function-after", "literal[", "constrained-int")):
            continue  # pydantic's union-branch labels, not keys
        elif out == "sweep" and "." in part:  # a sweep path is one key: quoted, as its own checks say it
            out += f".'{part}'"
        else:
            out += f".{part}" if out else str(part)
    return out


def _wrong_union_branch(e) -> bool:
    """True for the error of a scalar-or-list union's branch the input plainly was not meant for.

    ``fecundity = 2.0`` fails the list branch and ``fecundity = [0.0, "2"]`` the scalar branch:
    those errors are dropped. An error *inside* the list branch (its loc goes on past the branch
    label to an index) was given a list: it is the one to report, whatever the element was.
    """
    loc = e["loc"]
    at = next((i for i, p in enumerate(loc) if isinstance(p, str) and _is_branch_label(p)), None)
    if at is None:
        return False
    list_branch = loc[at].startswith("list[")
    given_list = isinstance(e.get("input"), list) or (list_branch and any(isinstance(p, int) for p in loc[at + 1:]))
    return list_branch != given_list and e["type"] in (
        "list_type", "float_type", "float_parsing", "int_type", "int_parsing", "literal_error")


def _is_branch_label(part: str) -> bool:
    return "[" in part or part in ("float", "int")


def messages(err: ValidationError) -> list[str]:
    """One line per problem, each naming its key; never empty (a ValidationError has errors)."""
    errors = err.errors(include_url=False)
    out = _worded(e for e in errors if not _wrong_union_branch(e))
    # every error dropped as a union's wrong branch would leave the user an empty message
    return out or _worded(errors)


def _worded(errors) -> list[str]:
    seen, out = set(), []
    for e in errors:
        path = _loc(e["loc"])
        kind = e["type"]
        got = e.get("input")
        if kind == "extra_forbidden":
            msg = f"unknown key {path}"
            parent, _, key = path.rpartition(".")
            model = _model_at(parent)
            if model is not None:
                msg += suggest(key, model) or f" (known keys: {', '.join(model.model_fields)})"
        elif kind == "value_error":
            text = e["msg"].removeprefix("Value error, ")
            if text.startswith("must"):
                msg = f"{path} {text}; got {got!r}"
            else:  # a model-level check: lines of 'key: reason', keys relative to its path
                for line in text.splitlines():
                    line = f"{path}.{line}" if path else line
                    if line not in seen:
                        seen.add(line)
                        out.append(line)
                continue
        elif kind == "finite_number":
            msg = f"{path} must be a finite number; got {got!r}"
        elif kind in ("int_type", "float_type", "string_type", "bool_type") and \
                isinstance(got, (str, bool, list, dict)):
            what = {"int_type": "a whole number", "float_type": "a number", "string_type": "a string",
                    "bool_type": "true or false"}[kind]
            if isinstance(got, str):
                msg = f"{path} must be {what} (written without quotes); got {got!r}"
            elif isinstance(got, bool):
                msg = f"{path} must be {what}, not true or false; got {got!r}"
            else:  # a list or a table where one value belongs (e.g. a list inside a list by age)
                msg = f"{path} must be {what}, not a {'list' if isinstance(got, list) else 'table'}; got {got!r}"
        elif kind == "list_type" and path.startswith("sweep.") and not isinstance(got, (list, dict)):
            msg = f"{path} must be a list of the values to sweep, e.g. [{got!r}]; got {got!r}"
        elif kind == "list_type" and isinstance(got, dict) and _tables_at(path):
            # `[allele.tall]` for `[[allele]]`: TOML makes one table of it, not a list of them
            msg = (f"{path} must be a list of tables, each begun by a line [[{path}]]; got one "
                   f"table{' [' + path + '.' + next(iter(got)) + ']' if len(got) == 1 else ''} "
                   f"holding {got!r}")
        elif kind == "missing":
            msg = f"{path} is required" + (f": one or more tables, each begun by a line [[{path}]]"
                                           if _tables_at(path) else "")
        elif kind == "literal_error":
            msg = f"{path} must be {e['msg'].removeprefix('Input should be ')}; got {got!r}"
        elif kind in ("greater_than_equal", "greater_than", "less_than_equal", "less_than"):
            op = {"greater_than_equal": ">=", "greater_than": ">", "less_than_equal": "<=", "less_than": "<"}[kind]
            bound = next(iter(e["ctx"].values()))
            msg = f"{path} must be {op} {bound}; got {got!r}"
        else:
            msg = f"{path}: {e['msg'].lower()}; got {got!r}"
        if msg not in seen:
            seen.add(msg)
            out.append(msg)
    return out


def _model_at(path: str):
    """The section a message's path leads to (``environment.year[0]``: a year type), or None."""
    model = Config
    for part in re.findall(r"[^.\[\]]+", path):
        if part.isdigit():
            continue  # an index into a list of tables
        field = model.model_fields.get(part)
        model = None if field is None else _section_in(field.annotation)
        if model is None:
            return None
    return model


def _tables_at(path: str) -> bool:
    """True where ``path`` is a list of config sections (``allele``, ``environment.year``),
    which TOML writes as an array of tables, ``[[path]]``."""
    parent, _, key = path.rpartition(".")
    model = _model_at(parent) if parent else Config
    field = None if model is None else model.model_fields.get(key)
    if field is None:
        return False
    return typing.get_origin(field.annotation) is list and _section_in(field.annotation) is not None


def _section_in(annotation):
    """The config section a field holds, alone, in a list or optional (None for a plain value)."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in typing.get_args(annotation):
        if (found := _section_in(arg)) is not None:
            return found
    return None
