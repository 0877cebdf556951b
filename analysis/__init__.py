"""Harken's background analysis: recordings in, quality checks, events, band features and monitoring out.

Public API (everything else is internal):

- reading:     ``read_audio``, ``audio_info``, ``read_sidecar``, ``Sidecar``, ``Audio``, ``AudioInfo``
- profiles:    ``load_profile``, ``DeviceProfile``, ``EventSpec``, ``BandSpec``, ``QualityLimits``
- one file:    ``analyse_file``, ``analyse_signals``, ``RecordingResult``
- monitoring:  ``ReferenceModel``, ``MonitoringResult`` (analysis.monitor), ``fit_models_from_paths``,
               ``load_models``, ``monitor_result`` (analysis.scoring)
- errors:      ``AnalysisError`` and its subclasses
- subpackages: ``analysis.signal`` (pure DSP), ``analysis.monitor`` (pure statistics), ``analysis.demo``
"""

from .errors import (
    AnalysisError,
    AudioError,
    ModelError,
    ParameterError,
    ProfileError,
    ScenarioError,
    SidecarError,
)
from .io import Audio, AudioInfo, Sidecar, audio_info, read_audio, read_sidecar
from .pipeline import RecordingResult, analyse_file, analyse_signals
from .profiles import BandSpec, DeviceProfile, EventSpec, QualityLimits, load_profile

__version__ = "0.1.0"

__all__ = [
    "AnalysisError", "AudioError", "ModelError", "ParameterError", "ProfileError", "ScenarioError", "SidecarError",
    "Audio", "AudioInfo", "Sidecar", "audio_info", "read_audio", "read_sidecar",
    "RecordingResult", "analyse_file", "analyse_signals",
    "BandSpec", "DeviceProfile", "EventSpec", "QualityLimits", "load_profile",
    "__version__",
]
