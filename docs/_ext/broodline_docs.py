"""Reference tables generated from the code, so the documentation cannot drift from it.

Directives of reStructuredText (from a MyST page, inside an ``{eval-rst}`` block: they
generate reStructuredText):

- ``config-reference``: every section and key of the TOML schema
  (``sim.config.schema.Config``), with its type, default, allowed values or
  range and description. Types and ranges are read from the pydantic fields:
  ``Literal`` words (``sim.vocabulary``), ``Field`` bounds, and the docstring
  of each ``AfterValidator`` function (``_probability``: "in [0, 1]").
- ``json-keys COMMAND``: the keys ``broodline COMMAND --json`` writes
  (``analysis.commands.JSON_KEYS``).
- ``command-reference``: every subcommand, its usage and its options, from
  ``sim.cli.build_parser``.
- ``outcomes``: the outcome words of ``sim.vocabulary.OUTCOMES``.

Anything the generator cannot describe (a field without a description, a
validator without a docstring, a type it does not know) raises, which fails
the build.
"""

from __future__ import annotations

import json
import re
import types
import typing

import annotated_types
from docutils.statemachine import StringList
from pydantic import BaseModel
from pydantic.functional_validators import AfterValidator
from sphinx.util.docutils import SphinxDirective
from sphinx.util.nodes import nested_parse_with_titles

__all__ = ["setup", "config_reference_lines", "json_keys_lines", "command_reference_lines"]


class DocsGenerationError(Exception):
    """The code holds something the generated reference cannot describe."""


# -- rst helpers ------------------------------------------------------------------------
def rst_text(text: str) -> str:
    """Plain text made literal in reStructuredText (one line, markup characters escaped)."""
    text = " ".join(str(text).split())
    return re.sub(r"([\\*`|_])", r"\\\1", text)


def literal(value: str) -> str:
    return f"``{value}``"


def list_table(header: list[str], rows: list[list[str]], widths: list[int]) -> list[str]:
    lines = [".. list-table::", "   :header-rows: 1", f"   :widths: {' '.join(map(str, widths))}", ""]
    for row in [header, *rows]:
        lines.append(f"   * - {row[0]}")
        lines += [f"     - {cell}" for cell in row[1:]]
    return lines + [""]


# -- the config schema ------------------------------------------------------------------
_SCALARS = {int: "integer", float: "number", str: "string", bool: "boolean"}


def _split_annotated(ann):
    """(base type, its validators' range texts) of a possibly Annotated type."""
    ranges = []
    if typing.get_origin(ann) is typing.Annotated:
        ann, *meta = typing.get_args(ann)
        ranges = _ranges(meta)
    return ann, ranges


def _ranges(metadata) -> list[str]:
    """Range texts of pydantic metadata: Field bounds and AfterValidator docstrings."""
    out = []
    for m in metadata:
        if isinstance(m, AfterValidator):
            doc = (m.func.__doc__ or "").strip()
            if not doc:
                raise DocsGenerationError(
                    f"validator {m.func.__qualname__} has no docstring: give it one line saying "
                    "what it allows (e.g. 'in [0, 1]'), the config reference shows it"
                )
            out.append(" ".join(doc.split()))
        elif isinstance(m, annotated_types.Ge):
            out.append(f">= {m.ge}")
        elif isinstance(m, annotated_types.Gt):
            out.append(f"> {m.gt}")
        elif isinstance(m, annotated_types.Le):
            out.append(f"<= {m.le}")
        elif isinstance(m, annotated_types.Lt):
            out.append(f"< {m.lt}")
        elif isinstance(m, annotated_types.MinLen):
            out.append(f"at least {m.min_length} {'item' if m.min_length == 1 else 'items'}"
                       if m.min_length else "")
        elif isinstance(m, annotated_types.MaxLen):
            out.append(f"at most {m.max_length} items")
        elif isinstance(m, annotated_types.Interval):
            out += _ranges([annotated_types.Ge(m.ge)] if m.ge is not None else [])
            out += _ranges([annotated_types.Gt(m.gt)] if m.gt is not None else [])
            out += _ranges([annotated_types.Le(m.le)] if m.le is not None else [])
            out += _ranges([annotated_types.Lt(m.lt)] if m.lt is not None else [])
    return [r for r in out if r]


def describe_type(ann) -> tuple[str, list[str]]:
    """(type in words, allowed values or ranges) of a field's annotation."""
    ann, ranges = _split_annotated(ann)
    origin = typing.get_origin(ann)
    if ann is typing.Any:
        return "any", ranges
    if origin is typing.Literal:
        words = ", ".join(literal(json.dumps(w)) for w in typing.get_args(ann))
        return "string", [f"one of {words}", *ranges]
    if origin in (typing.Union, types.UnionType):
        members = [a for a in typing.get_args(ann) if a is not type(None)]
        parts = [describe_type(a) for a in members]
        kinds = " or ".join(dict.fromkeys(p[0] for p in parts))
        allowed = list(dict.fromkeys(r for p in parts for r in p[1]))
        return kinds, allowed + ranges
    if origin is list:
        (inner,) = typing.get_args(ann)
        kind, allowed = describe_type(inner)
        return f"list of {kind}", [f"each {a}" for a in allowed] + ranges
    if origin is dict:
        return "table", ranges
    if isinstance(ann, type) and issubclass(ann, BaseModel):
        return "table", ranges
    if ann in _SCALARS:
        return _SCALARS[ann], ranges
    raise DocsGenerationError(f"the config reference cannot describe the type {ann!r}")


def describe_default(field) -> str:
    if field.is_required():
        return "required"
    if field.default_factory is not None:
        return "(see below)"
    value = field.default
    if value is None:
        return "unset"
    if isinstance(value, BaseModel):
        return "(its defaults)"
    return literal(json.dumps(value))


def _section_model(ann):
    """The model class of a section field (``X``, ``X | None``, ``list[X]``), or None."""
    for a in (ann, *typing.get_args(ann)):
        if isinstance(a, type) and issubclass(a, BaseModel):
            return a
    return None


def _description(model, name: str) -> str:
    from sim.config.schema import field_descriptions

    about = field_descriptions(model)[name]
    if not about:
        raise DocsGenerationError(
            f"{model.__name__}.{name} has no description: add a docstring under the field in "
            "sim/config/schema.py"
        )
    return about


def config_reference_lines(config_model=None) -> list[str]:
    """reStructuredText of every section and key of the config schema."""
    if config_model is None:
        from sim.config.schema import Config as config_model
    lines = []
    for name, field in config_model.model_fields.items():
        about = rst_text(_description(config_model, name))
        model = _section_model(field.annotation)
        title = "[[allele]]" if typing.get_origin(field.annotation) is list else f"[{name}]"
        lines += [f".. _config-{name}:", "", title, "-" * len(title), "", about, ""]
        if model is None:
            kind, allowed = describe_type(field.annotation)
            lines += [f"Type: {kind}; default: {describe_default(field)}.", ""]
            continue
        if field.is_required():
            lines += ["Required.", ""]
        rows = []
        for key, sub in model.model_fields.items():
            kind, allowed = describe_type(sub.annotation)
            allowed = allowed + _ranges(sub.metadata)
            if kind == "string":  # a length bound on a string is on its characters
                allowed = ["not empty" if a == "at least 1 item" else a for a in allowed]
            rows.append([
                literal(key),
                rst_text(kind),
                describe_default(sub),
                "; ".join(rst_text(a) if not a.startswith("one of") else a for a in allowed) or "",
                rst_text(_description(model, key)),
            ])
        lines += list_table(["key", "type", "default", "allowed", "meaning"], rows, [14, 10, 10, 18, 48])
    return lines


# -- JSON keys --------------------------------------------------------------------------
def json_keys_lines(command: str) -> list[str]:
    """reStructuredText tables of the keys ``broodline COMMAND --json`` writes."""
    from analysis.commands import JSON_KEYS, SWEPT

    if command not in JSON_KEYS:
        raise DocsGenerationError(f"json-keys: no command {command!r} in analysis.commands.JSON_KEYS")
    lines = []
    for part, keys in JSON_KEYS[command].items():
        table, _, condition = part.partition(", with ")
        caption = {"": "The object", "[]": "Each object of the list"}.get(part, f"Each object of ``{part}``")
        if condition:  # keys added under a condition (e.g. "points, with [environment]")
            caption = f"With ``{condition}``, added to each object of ``{table}``"
        rows = [[rst_text(k) if k == SWEPT else literal(k), rst_text(meaning)] for k, meaning in keys.items()]
        lines += [f"{caption}:", ""] + list_table(["key", "meaning"], rows, [25, 75])
    return lines


# -- commands ---------------------------------------------------------------------------
def _subcommands():
    import argparse

    from sim.cli import build_parser

    parser = build_parser()
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    helps = {a.dest: a.help for a in action._choices_actions}
    return [(name, helps.get(name, ""), sub) for name, sub in action.choices.items()]


def command_reference_lines() -> list[str]:
    """reStructuredText of every subcommand: its help, usage and options."""
    lines = []
    for name, about, sub in _subcommands():
        usage = " ".join(sub.format_usage().split())
        usage = usage.removeprefix("usage: ")
        title = f"broodline {name}"
        lines += [f".. _command-{name}:", "", f".. rubric:: {title}", "", rst_text(about), "",
                  ".. code-block:: text", "", f"   {usage}", ""]
        rows = []
        for action in sub._actions:
            if action.help == "==SUPPRESS==" or "-h" in action.option_strings:
                continue
            names = ", ".join(action.option_strings) or (action.metavar or action.dest)
            if action.option_strings and action.nargs != 0:
                metavar = action.metavar or action.dest.upper()
                metavar = " ".join(metavar) if isinstance(metavar, tuple) else metavar
                names += f" {metavar}"
            rows.append([literal(names), rst_text(action.help or "")])
        if rows:
            lines += list_table(["argument", "meaning"], rows, [30, 70])
    return lines


def command_table_lines() -> list[str]:
    rows = [[f":ref:`broodline {name} <command-{name}>`", rst_text(about)] for name, about, _ in _subcommands()]
    return list_table(["command", "what it does"], rows, [25, 75])


def outcome_lines() -> list[str]:
    from sim.vocabulary import OUTCOMES

    return [", ".join(literal(o) for o in OUTCOMES), ""]


# -- directives -------------------------------------------------------------------------
class _Generated(SphinxDirective):
    has_content = False
    optional_arguments = 1

    def lines(self) -> list[str]:
        raise NotImplementedError

    def run(self):
        from docutils import nodes

        node = nodes.section()
        node.document = self.state.document
        nested_parse_with_titles(self.state, StringList(self.lines(), source="(generated)"), node)
        return node.children


class ConfigReference(_Generated):
    def lines(self):
        return config_reference_lines()


class JsonKeys(_Generated):
    required_arguments = 1
    optional_arguments = 0

    def lines(self):
        return json_keys_lines(self.arguments[0])


class CommandReference(_Generated):
    def lines(self):
        return command_reference_lines()


class CommandTable(_Generated):
    def lines(self):
        return command_table_lines()


class Outcomes(_Generated):
    def lines(self):
        return outcome_lines()


def setup(app):
    app.add_directive("config-reference", ConfigReference)
    app.add_directive("json-keys", JsonKeys)
    app.add_directive("command-reference", CommandReference)
    app.add_directive("command-table", CommandTable)
    app.add_directive("outcomes", Outcomes)
    return {"parallel_read_safe": True, "parallel_write_safe": True}
