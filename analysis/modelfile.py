"""Reference-model files: ``<name>.json`` (parameters, limits, metadata) beside ``<name>.npz`` (arrays).

The file side of analysis.monitor.ReferenceModel.to_documents / from_documents (Harken's own format, version 1;
the JSON records the npz's SHA-256, checked on load; the npz holds plain arrays and is read without pickle).
"""

from __future__ import annotations

import json
from pathlib import Path

from .errors import ModelError
from .monitor import ReferenceModel

__all__ = ["save_model", "load_model"]


def save_model(model: ReferenceModel, path, *, metadata=None) -> tuple[Path, Path]:
    """Write ``path`` with suffix .json and .npz; returns (json_path, npz_path)."""
    path = Path(path)
    json_path, npz_path = path.with_suffix(".json"), path.with_suffix(".npz")
    text, blob = model.to_documents(metadata=metadata)
    doc = json.loads(text)
    doc["arrays_file"] = npz_path.name
    try:
        npz_path.write_bytes(blob)
        json_path.write_text(json.dumps(doc, indent=2, ensure_ascii=False), encoding="utf-8")
    except OSError as exc:
        raise ModelError(f"{exc.filename or path}: cannot write reference model ({exc.strerror or exc})") from None
    return json_path, npz_path


def load_model(path) -> ReferenceModel:
    """Read a model written by save_model; ``path`` may name the .json file or the common stem."""
    json_path = Path(path).with_suffix(".json")
    try:
        text = json_path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ModelError(f"{json_path}: cannot read reference model: {exc.strerror or exc}") from None
    try:
        arrays_file = json.loads(text).get("arrays_file", json_path.with_suffix(".npz").name)
    except (json.JSONDecodeError, AttributeError):
        arrays_file = json_path.with_suffix(".npz").name
    npz_path = json_path.with_name(str(arrays_file))
    try:
        blob = npz_path.read_bytes()
    except OSError as exc:
        raise ModelError(f"{npz_path}: cannot read reference model arrays: {exc.strerror or exc}") from None
    return ReferenceModel.from_documents(text, blob, source=str(json_path))
