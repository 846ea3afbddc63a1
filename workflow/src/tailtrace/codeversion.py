"""Which package modules a rule really runs, for its code-version parameter.

Snakemake sees a script's own edits, not those of the modules it imports. A
rule therefore gets a hash of the modules it names and of everything they
import at module level from this package, followed transitively, so editing
an estimator reruns the rules that use it and no others. Imports inside
functions (kept lazy to save start-up time) are not followed: each rule names
the modules its step calls.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Iterable

from .hashing import source_hash

__all__ = ["module_closure", "code_version"]

_IMPORT = re.compile(r"^(?:from\s+(\.+|tailtrace\.?)([\w.]*)\s+import\s+([\w, ()]+)|import\s+tailtrace\.([\w.]+))", re.M)


def _resolve(root: Path, current: str, dots: str, name: str) -> list[str]:
    """Module names (dotted, relative to the package) an import line refers to."""
    if dots.startswith("tailtrace"):
        base: list[str] = []
    else:
        base = current.split(".")[: -len(dots)] if len(dots) <= current.count(".") + 1 else []
    return [".".join([*base, *[p for p in name.split(".") if p]])]


def _file_of(root: Path, module: str) -> Path | None:
    path = root.joinpath(*module.split("."))
    if path.with_suffix(".py").is_file():
        return path.with_suffix(".py")
    if (path / "__init__.py").is_file():
        return path / "__init__.py"
    return None


def module_closure(root: str | Path, modules: Iterable[str]) -> list[Path]:
    """Source files of ``modules`` (dotted or slashed names) and everything they import from the package."""
    root = Path(root)
    todo = [m.replace("/", ".") for m in modules]
    seen: dict[str, Path] = {}
    while todo:
        module = todo.pop()
        if module in seen:
            continue
        path = _file_of(root, module)
        if path is None:
            raise FileNotFoundError(f"no module {module} under {root}")
        seen[module] = path
        if path.name == "__init__.py":  # a package: all of it
            for sub in sorted(path.parent.rglob("*.py")):
                rel = sub.relative_to(root).with_suffix("")
                name = ".".join(p for p in rel.parts if p != "__init__")
                if name not in seen:
                    todo.append(name)
        package = module if path.name == "__init__.py" else module.rpartition(".")[0]
        for dots, name, names, absolute in _IMPORT.findall(path.read_text()):
            if absolute:
                todo.append(absolute)
                continue
            current = f"{package}.x" if package else "x"
            target = _resolve(root, current, dots, name)[0]
            candidates = [target] + [f"{target}.{n.strip()}" if target else n.strip()
                                     for n in names.strip("() ").split(",") if n.strip()]
            todo += [c for c in candidates if c and _file_of(root, c) is not None]
    return sorted(seen.values())


def code_version(root: str | Path, modules: Iterable[str]) -> str:
    """Short hash of the closure of ``modules``."""
    return source_hash(module_closure(root, modules))
