"""The one exception hierarchy of the analysis package.

Every error says what was wrong, with the bad value and where it came from (file, key, parameter).
"""

from __future__ import annotations

__all__ = [
    "AnalysisError",
    "AudioError",
    "SidecarError",
    "ProfileError",
    "ParameterError",
    "ModelError",
    "ScenarioError",
]


class AnalysisError(Exception):
    """Root of every error raised by Harken's analysis package."""


class AudioError(AnalysisError):
    """A recording could not be read or is unusable: names the file and the reason."""

    def __init__(self, path, reason: str):
        self.path = str(path)
        self.reason = reason
        super().__init__(f"{self.path}: {reason}")


class SidecarError(AnalysisError):
    """A sidecar metadata file is missing, malformed, or has a missing/mistyped field."""

    def __init__(self, path, reason: str, *, field: str | None = None):
        self.path = str(path)
        self.reason = reason
        self.field = field
        super().__init__(f"{self.path}: {reason}")


class ProfileError(AnalysisError):
    """A device profile is missing or invalid: names the file, the key and the value."""

    def __init__(self, source, reason: str, *, key: str | None = None):
        self.source = str(source)
        self.reason = reason
        self.key = key
        super().__init__(f"{self.source}: {reason}")


class ParameterError(AnalysisError, ValueError):
    """A function was called with a parameter outside its allowed values."""


class ModelError(AnalysisError):
    """A reference model is unfitted, incompatible with the data, or its file is unreadable."""


class ScenarioError(AnalysisError):
    """A demo scenario file is missing or invalid."""
