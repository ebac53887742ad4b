"""YAML files validated against the JSON schemas shipped in ``kinset/schemas``.

YAML is only ever read with the safe loader. Validation fills the defaults given
in the schema, and every error names the file, the line and the key.
"""

from __future__ import annotations

import copy
import json
import re
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any

import jsonschema
import yaml

from kinset.errors import InputError


class _Loader(yaml.SafeLoader):
    """The safe loader, reading ``1e-9`` as a number.

    YAML 1.1 (PyYAML) takes a float only with a dot (``1.0e-9``); engineers write
    ``1e-9``, and YAML 1.2 reads it as a number, so this loader does too.
    """


_Loader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"""^(?:[-+]?(?:[0-9][0-9_]*)(?:\.[0-9_]*)?(?:[eE][-+]?[0-9]+)
                |[-+]?\.[0-9_]+(?:[eE][-+][0-9]+)?
                |[-+]?[0-9][0-9_]*(?::[0-5]?[0-9])+\.[0-9_]*
                |[-+]?\.(?:inf|Inf|INF)
                |\.(?:nan|NaN|NAN)
                |[-+]?(?:[0-9][0-9_]*)\.[0-9_]*)$""", re.X),
    list("-+0123456789."))


def schema_path(kind: str) -> Path:
    """Path of a shipped schema: ``reel``, ``workflow`` or ``application``."""
    return Path(str(resources.files("kinset") / "schemas" / f"{kind}.schema.json"))


@lru_cache(maxsize=None)
def load_schema(kind: str) -> dict:
    return json.loads(schema_path(kind).read_text(encoding="utf-8"))


def _key_lines(node: yaml.Node, path: tuple = (), out: dict | None = None) -> dict:
    """Map each key path in a composed YAML document to its 1-based line."""
    out = {} if out is None else out
    if isinstance(node, yaml.MappingNode):
        for key, value in node.value:
            sub = path + (key.value,)
            out[sub] = key.start_mark.line + 1
            _key_lines(value, sub, out)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            out[path + (i,)] = item.start_mark.line + 1
            _key_lines(item, path + (i,), out)
    return out


def read_yaml(path: str | Path) -> tuple[Any, dict]:
    """Safely load a YAML file; return its data and a key-path -> line map."""
    path = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise InputError(f"cannot read file: {exc.strerror}", path) from None
    except UnicodeDecodeError:
        raise InputError("file is not valid UTF-8 text", path) from None
    try:
        node = yaml.compose(text, Loader=_Loader)
        data = yaml.load(text, Loader=_Loader)  # noqa: S506 - _Loader is a SafeLoader
    except yaml.MarkedYAMLError as exc:
        line = exc.problem_mark.line + 1 if exc.problem_mark else None
        context = ""
        if exc.context_mark is not None and exc.context_mark.line + 1 != line:
            context = f" ({exc.context} on line {exc.context_mark.line + 1})"
        raise InputError(f"not valid YAML: {exc.problem}{context}", path, line) from None
    except yaml.YAMLError as exc:
        raise InputError(f"not valid YAML: {exc}", path) from None
    lines = _key_lines(node) if node is not None else {}
    return data, lines


def _fill_defaults(instance: Any, schema: dict) -> None:
    """Fill schema defaults into dicts, recursively (after validation passed)."""
    if not isinstance(instance, dict):
        return
    for key, sub in schema.get("properties", {}).items():
        if key not in instance and "default" in sub:
            instance[key] = copy.deepcopy(sub["default"])
        if key in instance:
            _fill_defaults(instance[key], sub)


def validate(data: Any, kind: str, path: str | Path, lines: dict | None = None) -> dict:
    """Validate ``data`` against the shipped schema ``kind`` and fill its defaults.

    Raises
    ------
    InputError
        Naming the file, the line and the key of the first problem found.
    """
    schema = load_schema(kind)
    if data is None:
        data = {}
    validator = jsonschema.Draft202012Validator(schema)
    errors = sorted(validator.iter_errors(data), key=lambda e: (len(e.path), list(map(str, e.path))))
    if errors:
        err = errors[0]
        key_path = tuple(err.path)
        message = err.message
        if err.validator == "additionalProperties":
            allowed = sorted(err.schema.get("properties", {}))
            extra = sorted(set(err.instance) - set(allowed))
            bad = extra[0] if extra else "?"
            key_path = key_path + (bad,)
            message = f"unknown key '{bad}' (allowed here: {', '.join(allowed)})"
        elif err.validator == "required":
            message = f"missing required key: {err.message.split(' ')[0]}"
        elif err.validator == "oneOf":
            message = f"value {json.dumps(err.instance)} does not fit any accepted form"
        line = None
        if lines:
            probe = key_path
            while probe and probe not in lines:
                probe = probe[:-1]
            line = lines.get(probe)
        column = ".".join(str(p) for p in key_path) or None
        raise InputError(message, path, line, column)
    data = copy.deepcopy(data)
    _fill_defaults(data, schema)
    return data
