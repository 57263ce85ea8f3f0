"""A validated spec together with where it came from (file and line numbers).

Later stages use ``where`` to name the spec file, line and field in their errors,
e.g. ``tutoring.yaml, line 14, model.instruments[1]``.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

from reportkit.spec.models import Spec

FieldPath = tuple[str | int, ...]


def format_field_path(path: FieldPath) -> str:
    """('model', 'instruments', 1) -> 'model.instruments[1]'."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + part
    return out


@dataclass(frozen=True)
class LoadedSpec:
    spec: Spec
    base_dir: Path  # folder that relative paths in the spec are resolved against
    source: Path | None = None  # the spec file, None for a spec given as a dict
    lines: Mapping[FieldPath, int] = field(default_factory=dict)  # 1-based line numbers

    @property
    def source_name(self) -> str:
        return self.source.name if self.source is not None else "spec"

    def line_of(self, path: FieldPath) -> int | None:
        """The line of the field, or of its nearest enclosing field that has one."""
        p = tuple(path)
        while p:
            if p in self.lines:
                return self.lines[p]
            p = p[:-1]
        return None

    def where(self, path: FieldPath) -> str:
        line = self.line_of(path)
        loc = f"{self.source_name}, line {line}" if line else self.source_name
        return f"{loc}, {format_field_path(path)}" if path else loc

    def resolve_path(self, relative: str) -> Path:
        p = Path(relative)
        return p if p.is_absolute() else (self.base_dir / p)
