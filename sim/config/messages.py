"""Config errors in the user's words: pydantic's validation errors as ``path must ...; got ...``."""

from __future__ import annotations

from pydantic import ValidationError

from .schema import SECTIONS, AlleleSection, Config, suggest

__all__ = ["messages"]


def _loc(loc: tuple) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif part in ("float", "list[float]", "int", "list[constrained-float]", "constrained-float") \
                or part.startswith(("list[", "function-after", "literal[", "constrained-int")):
            continue  # pydantic's union-branch labels, not keys
        else:
            out += f".{part}" if out else str(part)
    return out


def _wrong_union_branch(e) -> bool:
    """True for the error of a scalar-or-list union's branch the input plainly was not meant for."""
    labels = [p for p in e["loc"] if isinstance(p, str) and ("[" in p or p in ("float", "int"))]
    if not labels:
        return False
    list_branch = labels[0].startswith("list[")
    return list_branch != isinstance(e.get("input"), list) and e["type"] in (
        "list_type", "float_type", "float_parsing", "int_type", "int_parsing", "literal_error")


def messages(err: ValidationError) -> list[str]:
    seen, out = set(), []
    for e in err.errors(include_url=False):
        if _wrong_union_branch(e):
            continue
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
        elif kind in ("int_type", "float_type", "string_type", "bool_type") and isinstance(got, (str, bool)):
            what = {"int_type": "a whole number", "float_type": "a number", "string_type": "a string",
                    "bool_type": "true or false"}[kind]
            msg = f"{path} must be {what} (written without quotes); got {got!r}" if isinstance(got, str) \
                else f"{path} must be {what}, not true or false; got {got!r}"
        elif kind == "missing":
            msg = f"{path} is required"
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
    head = path.split("[")[0].split(".")[0]
    if path == "":
        return Config
    if head == "allele":
        return AlleleSection
    return SECTIONS.get(head)
