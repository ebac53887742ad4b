"""YAML files validated against the JSON schemas shipped in ``kinset/schemas``.

YAML is only ever read with the safe loader. Validation fills the defaults given
in the schema, and every error names the file, the line and the key.
"""

from __future__ import annotations

import copy
import json
import math
import re
from difflib import get_close_matches
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


def _key_lines(node: yaml.Node, path: tuple = (), out: dict | None = None,
               file: str | None = None) -> dict:
    """Map each key path in a composed YAML document to its 1-based line.

    A key written twice in one mapping is an error: YAML's loader would silently keep
    the last one, so a setting could change without anyone seeing why.
    """
    out = {} if out is None else out
    if isinstance(node, (yaml.MappingNode, yaml.SequenceNode)):
        # An alias repeats a node: walk it once (nested aliases would grow exponentially).
        visited = out.setdefault(None, set())
        if id(node) in visited:
            return out
        visited.add(id(node))
    if isinstance(node, yaml.MappingNode):
        seen: dict = {}
        for key, value in node.value:
            name = key.value if isinstance(key, yaml.ScalarNode) else repr(key.value)
            line = key.start_mark.line + 1
            if name in seen and name != "<<":
                raise InputError(f"key '{name}' appears twice in one mapping (first on line "
                                 f"{seen[name]})", file, line, ".".join(map(str, path + (name,))))
            seen[name] = line
            sub = path + (name,)
            out[sub] = line
            _key_lines(value, sub, out, file)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            out[path + (i,)] = item.start_mark.line + 1
            _key_lines(item, path + (i,), out, file)
    return out


def read_yaml(path: str | Path) -> tuple[Any, dict]:
    """Safely load a YAML file; return its data and a key-path -> line map."""
    path = str(path)
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read file: {exc.strerror}", path) from None
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise InputError("file is UTF-16 text; save it as UTF-8", path, 1)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        start = exc.start + (3 if raw.startswith(b"\xef\xbb\xbf") else 0)
        raise InputError(f"byte 0x{raw[start]:02x} is not valid UTF-8 text (save the file "
                         f"as UTF-8)", path, raw.count(b"\n", 0, start) + 1) from None
    try:
        # One parse: the node tree gives the key lines and, constructed, the data
        # (what yaml.load does after composing; parsing twice cost a step 5 ms).
        loader = _Loader(text)
        try:
            node = loader.get_single_node()
            data = loader.construct_document(node) if node is not None else None
        finally:
            loader.dispose()
    except yaml.MarkedYAMLError as exc:
        line = exc.problem_mark.line + 1 if exc.problem_mark else None
        context = ""
        if exc.context_mark is not None and exc.context_mark.line + 1 != line:
            context = f" ({exc.context} on line {exc.context_mark.line + 1})"
        raise InputError(f"not valid YAML: {exc.problem}{context}", path, line) from None
    except yaml.YAMLError as exc:
        raise InputError(f"not valid YAML: {exc}", path) from None
    lines = _key_lines(node, file=path) if node is not None else {}
    lines.pop(None, None)
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


def _walk(data: Any, path: tuple = (), seen: set | None = None):
    """Every (key path, value) of loaded YAML; aliases to one object are visited once."""
    seen = set() if seen is None else seen
    if isinstance(data, (dict, list)):
        if id(data) in seen:
            return
        seen.add(id(data))
        items = data.items() if isinstance(data, dict) else enumerate(data)
        for k, v in items:
            yield from _walk(v, path + (k,), seen)
    else:
        yield path, data


def _line_of(key_path: tuple, lines: dict | None) -> int | None:
    """Line of a key path, or of its nearest parent that has one.

    Compared as text: YAML keys are recorded as written, a loaded key may be a number.
    """
    if not lines:
        return None
    text = {tuple(map(str, k)): v for k, v in lines.items()}
    probe = tuple(map(str, key_path))
    while probe and probe not in text:
        probe = probe[:-1]
    return text.get(probe)


def _nearest(word: Any, names: list[str]) -> str:
    """``did you mean 'x'? `` for the closest of ``names`` (difflib's ratio), or ''."""
    close = get_close_matches(str(word), names, n=1)
    return f"did you mean '{close[0]}'? " if close else ""


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
    for key_path, value in _walk(data):
        if isinstance(value, float) and not math.isfinite(value):
            raise InputError(f"{value} is not a finite number", path, _line_of(key_path, lines),
                             ".".join(map(str, key_path)))
    validator = jsonschema.Draft202012Validator(schema)
    errors = sorted(validator.iter_errors(data), key=lambda e: (len(e.path), list(map(str, e.path))))
    if errors:
        err = errors[0]
        key_path = tuple(err.path)
        message = err.message
        if err.validator == "additionalProperties":
            allowed = sorted(err.schema.get("properties", {}))
            extra = sorted(set(err.instance) - set(allowed), key=str)
            bad = extra[0] if extra else "?"
            key_path = key_path + (bad,)
            message = f"unknown key '{bad}' ({_nearest(bad, allowed)}allowed here: " \
                      f"{', '.join(allowed)})"
        elif err.validator == "enum":
            hint = _nearest(err.instance, [str(c) for c in err.validator_value])
            message = f"{err.message} ({hint.strip()})" if hint else err.message
        elif err.validator == "required":
            message = f"missing required key: {err.message.split(' ')[0]}"
        elif err.validator == "oneOf":
            message = f"value {json.dumps(err.instance, default=str)} does not fit any accepted form"
        line = _line_of(key_path, lines)
        column = ".".join(str(p) for p in key_path) or None
        raise InputError(message, path, line, column)
    data = copy.deepcopy(data)
    _fill_defaults(data, schema)
    return data
