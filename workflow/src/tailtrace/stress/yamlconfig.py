"""Read a YAML config file, validate it against its JSON schema, locate errors by line."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np
import yaml

from ..errors import ConfigError, InputError

__all__ = ["YamlDocument", "load_yaml_document", "schema_path", "parse_date"]

# workflow/src/tailtrace/stress/ -> workflow/schemas/
_SCHEMA_DIR = Path(__file__).resolve().parents[3] / "schemas"


class _PlainLoader(yaml.SafeLoader):
    """SafeLoader that keeps dates as strings so the schema sees what was written."""


_PlainLoader.yaml_implicit_resolvers = {
    key: [(tag, regexp) for tag, regexp in resolvers if tag != "tag:yaml.org,2002:timestamp"]
    for key, resolvers in yaml.SafeLoader.yaml_implicit_resolvers.items()
}


def schema_path(name: str) -> Path:
    """Path of ``workflow/schemas/<name>`` next to the package source."""
    path = _SCHEMA_DIR / name
    if not path.is_file():
        raise ConfigError(f"schema {name} not found at {path}; pass schema= explicitly")
    return path


@dataclass(frozen=True)
class YamlDocument:
    """Parsed YAML data plus the node tree, to report line numbers.

    Attributes
    ----------
    file : str
        Path as given, used in error messages.
    data : object
        The loaded document (dates stay strings).
    """

    file: str
    data: Any
    _root: yaml.Node

    def line_of(self, path: Sequence[str | int]) -> int | None:
        """1-based line of the node at ``path`` (keys and list indices), or of its nearest parent."""
        node = self._root
        for step in path:
            if isinstance(node, yaml.MappingNode) and isinstance(step, str):
                nxt = next((v for k, v in node.value if k.value == step), None)
            elif isinstance(node, yaml.SequenceNode) and isinstance(step, int) and 0 <= step < len(node.value):
                nxt = node.value[step]
            else:
                nxt = None
            if nxt is None:
                break
            node = nxt
        return node.start_mark.line + 1

    def error(self, message: str, path: Sequence[str | int], column: str | None = None, value: object = None) -> InputError:
        """An :class:`InputError` located at ``path`` in this file."""
        return InputError(message, file=self.file, row=self.line_of(path), column=column, value=value)


def _check_duplicate_keys(node: yaml.Node, file: str) -> None:
    # PyYAML silently keeps the last of two equal keys; a config typo must not pass.
    if isinstance(node, yaml.MappingNode):
        seen: set[str] = set()
        for key, value in node.value:
            if key.value in seen:
                raise InputError("duplicate key", file=file, row=key.start_mark.line + 1, column=str(key.value))
            seen.add(key.value)
            _check_duplicate_keys(value, file)
    elif isinstance(node, yaml.SequenceNode):
        for item in node.value:
            _check_duplicate_keys(item, file)


def _describe(path: Sequence[str | int]) -> str:
    text = ""
    for step in path:
        text += f"[{step}]" if isinstance(step, int) else (f".{step}" if text else str(step))
    return text or "document"


def load_yaml_document(file: str | Path, schema: str | Path) -> YamlDocument:
    """Load ``file`` and validate it against the JSON schema (YAML) at ``schema``.

    Parameters
    ----------
    file : path
        The config file.
    schema : path
        JSON Schema (draft 2020-12) written in YAML.

    Returns
    -------
    YamlDocument

    Raises
    ------
    InputError
        Unreadable YAML, duplicate keys or a schema violation, with the file,
        the line and the offending key.
    """
    import jsonschema  # a dependency of snakemake; imported here to keep light jobs light

    file = str(file)
    try:
        text = Path(file).read_text(encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot read config file: {exc.strerror}", file=file) from None
    try:
        root = yaml.compose(text, Loader=_PlainLoader)
        data = yaml.load(text, Loader=_PlainLoader)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        raise InputError(
            f"not valid YAML: {getattr(exc, 'problem', exc)}", file=file, row=None if mark is None else mark.line + 1
        ) from None
    if root is None:
        raise InputError("the file is empty", file=file)
    _check_duplicate_keys(root, file)
    doc = YamlDocument(file, data, root)

    schema_doc = yaml.safe_load(Path(schema).read_text(encoding="utf-8"))
    validator = jsonschema.Draft202012Validator(schema_doc)
    errors = sorted(validator.iter_errors(data), key=lambda e: (list(map(str, e.absolute_path)), e.message))
    if errors:
        err = errors[0]
        path = list(err.absolute_path)
        column = next((str(p) for p in reversed(path) if isinstance(p, str)), None)
        if err.validator in ("required", "additionalProperties"):
            column = None
        raise doc.error(f"{_describe(path)}: {err.message}", path, column=column)
    return doc


def parse_date(doc: YamlDocument, path: Sequence[str | int], text: str) -> np.datetime64:
    """Parse an ISO 8601 calendar date at ``path``; an InputError names the file and line."""
    try:
        value = np.datetime64(text, "D")
        if str(value) != text:
            raise ValueError
    except ValueError:
        raise doc.error(
            f"{_describe(path)}: not an ISO 8601 date (YYYY-MM-DD)", path, column=str(path[-1]), value=text
        ) from None
    return value
