"""The analysis specification: models, YAML loading with line numbers, the resolved spec."""

from __future__ import annotations

from reportkit.spec.loaded import LoadedSpec
from reportkit.spec.loader import (
    dump_resolved_spec,
    load_spec,
    load_spec_dict,
    spec_json_schema,
)
from reportkit.spec.models import Spec

__all__ = [
    "LoadedSpec",
    "Spec",
    "dump_resolved_spec",
    "load_spec",
    "load_spec_dict",
    "spec_json_schema",
]
