"""Shared fixtures: synthetic recordings written as real files through libsndfile, with their sidecars; the
demo's small scenario; a store filled from it."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

FS = 48_000


def synth_actuation(
    *,
    seed: int = 0,
    sample_rate_hz: int = FS,
    duration_s: float = 1.2,
    click_s: float = 0.302,
    release_s: float = 0.405,
    marker_times_s: tuple[float, ...] = (0.300, 0.380),
    noise_rms: float = 0.001,
) -> tuple[np.ndarray, np.ndarray]:
    """A simple two-event actuation (mic, marker), independent of the demo generator.

    A 3 kHz damped-sine click at ``click_s``; a 0.3 s noise burst with a 1.2 kHz resonance at ``release_s``;
    rectangular 2 ms marker pulses of 0.8 FS at ``marker_times_s``.
    """
    rng = np.random.default_rng(seed)
    n = int(round(duration_s * sample_rate_hz))
    t = np.arange(n) / sample_rate_hz
    mic = rng.standard_normal(n) * noise_rms
    tc = t - click_s
    on = tc >= 0
    mic[on] += 0.3 * np.exp(-tc[on] / 0.004) * np.sin(2 * np.pi * 3000.0 * tc[on])
    tr = t - release_s
    burst = (tr >= 0) & (tr < 0.3)
    env = np.where(burst, np.exp(-np.clip(tr, 0, None) / 0.12), 0.0)
    noise = rng.standard_normal(n)
    mic += 0.05 * env * noise + 0.05 * env * np.sin(2 * np.pi * 1200.0 * t)
    marker = np.zeros(n)
    for m in marker_times_s:
        i = int(round(m * sample_rate_hz))
        marker[i : i + int(0.002 * sample_rate_hz)] = 0.8
    return mic.astype(np.float32), marker.astype(np.float32)


def sidecar_dict(**over) -> dict:
    base = {
        "site": "Testfield",
        "rig": "TF-R1",
        "lot": "T001",
        "unit": "U01",
        "actuation": 1,
        "recorded_at": "2026-03-02T09:14:05+01:00",
        "profile": "demo-dpi",
        "channels": {"mic": 0, "marker": 1},
    }
    base.update(over)
    return {k: v for k, v in base.items() if v is not None}


def write_recording(
    folder: Path, stem: str = "rec", *, fmt: str = "FLAC", subtype: str = "PCM_24", sidecar: dict | None = None,
    data: np.ndarray | None = None, sample_rate_hz: int = FS, seed: int = 0,
) -> Path:
    """Write a recording and (unless sidecar is False) its sidecar; returns the audio path."""
    folder.mkdir(parents=True, exist_ok=True)
    if data is None:
        mic, marker = synth_actuation(seed=seed, sample_rate_hz=sample_rate_hz)
        data = np.column_stack([mic, marker])
    ext = {"FLAC": ".flac", "WAV": ".wav"}[fmt]
    path = folder / f"{stem}{ext}"
    sf.write(str(path), data, sample_rate_hz, format=fmt, subtype=subtype)
    if sidecar is not False:
        (folder / f"{stem}.json").write_text(json.dumps(sidecar if sidecar is not None else sidecar_dict()))
    return path


@pytest.fixture
def recording(tmp_path) -> Path:
    """A two-channel FLAC (mic + marker pulses) with a valid sidecar."""
    return write_recording(tmp_path)


@pytest.fixture(scope="session")
def small_scenario(tmp_path_factory) -> Path:
    """The demo generator's 'small' scenario, generated once per test session (an inbox-style tree)."""
    from analysis.demo import generate

    out = tmp_path_factory.mktemp("small-scenario")
    generate(out, scenario="small")
    return out


@pytest.fixture(scope="session")
def filled_store(small_scenario, tmp_path_factory):
    """(store URL, info) of a SQLite store holding the small scenario, analysed and scored, with its reference
    models built (tests/fill.py). Tests must not write to it: a test that writes copies it with ``store_copy``."""
    from tests.fill import fill_store

    folder = tmp_path_factory.mktemp("dash-store")
    url = f"sqlite:///{folder / 'harken.db'}"
    info = fill_store(small_scenario, url, jobs=1)
    info["folder"] = folder
    return url, info


@pytest.fixture
def store_copy(filled_store, tmp_path):
    """A private copy of the filled store (database and archive) that a test may write to."""
    url, info = filled_store
    src: Path = info["folder"]
    dst = tmp_path / "copy"
    shutil.copytree(src, dst, ignore=shutil.ignore_patterns("*-dashboard-cache"))
    return f"sqlite:///{dst / 'harken.db'}"


def add_people(store_url: str, people, *, password: str) -> str:
    """Add users (name, role[, full name]) with one password to the store at store_url; returns the URL."""
    from analysis.store import Store
    from analysis.store.users import add_user

    with Store.open(store_url, create=False) as store, store.write() as conn:
        for name, role, *full in people:
            add_user(conn, name, role=role, full_name=full[0] if full else "", password=password, by="test")
    return store_url
