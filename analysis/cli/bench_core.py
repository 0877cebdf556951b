"""`harken bench analyse` and `harken bench score`: the analysis of recordings against a decode + FFT floor and a
plain peer, and scoring against the bare matrix products, each timed interleaved in the same run.

The analysis floor is the decode and the bare FFTs of the frames the analysis computes: every event's slices and
the onset search's flux frames. The onset search covers only each search window and its background stretch
(analysis.signal.events.window_onsets), so the floor counts those frames (window_search_frames), not the flux of
the whole recording the search once computed; that older floor is still timed and printed beside it
(ratio_to_whole_flux_floor) so that runs before and after the change compare. The peer is unchanged."""

from __future__ import annotations

import math
import tempfile
import time
from pathlib import Path

import numpy as np
import scipy.signal

__all__ = ["bench_analyse", "bench_score", "interleaved_best"]



def interleaved_best(fns, repeat: int) -> list[float]:
    """Best-of-``repeat`` seconds of each function, run in turn each round: a load spike hits them all alike."""
    best = [float("inf")] * len(fns)
    for _ in range(max(1, repeat)):
        for k, fn in enumerate(fns):
            t0 = time.perf_counter()
            fn()
            best[k] = min(best[k], time.perf_counter() - t0)
    return best


# --------------------------------------------------------------------------------------------------- analyse


def _floor_one(path: Path, frames_plan, windows) -> None:
    """Decode + the bare numpy FFTs of the frames the analysis needs (the onset search and every event's slices),
    in float32 like the analysis, framed by a strided view, windows computed once outside the timing."""
    from numpy.lib.stride_tricks import sliding_window_view

    from ..io import read_audio

    x = read_audio(path).samples[:, 0]
    for n_window, starts in frames_plan:
        view = sliding_window_view(x, n_window)
        starts = starts[starts < view.shape[0]]
        np.fft.rfft(view[starts] * windows[n_window], axis=1)


def _peer_one(path: Path, event_plans) -> None:
    """A plain approach: scipy.signal.spectrogram of the whole file per event grid, then numpy band averaging."""
    from ..io import read_audio

    audio = read_audio(path)
    x = audio.samples[:, 0].astype(np.float64)
    fs = audio.sample_rate_hz
    for n_window, n_hop, lower, upper in event_plans:
        f, _, sxx = scipy.signal.spectrogram(
            x, fs=fs, window="hann", nperseg=n_window, noverlap=n_window - n_hop, scaling="spectrum", mode="psd"
        )
        levels = np.empty((len(lower), sxx.shape[1]))
        for b, (lo, hi) in enumerate(zip(lower, upper)):
            mask = (f >= lo) & (f < hi)
            levels[b] = sxx[mask].sum(axis=0) if mask.any() else 0.0
        10.0 * np.log10(levels + 1e-20)


def bench_analyse(*, n_files: int = 60, repeat: int = 3, out=print) -> dict:
    """Analyse a generated batch; print time per recording and the ratios to the floor and to the peer (and to
    the older floor with the whole recording's flux frames)."""
    from ..demo import generate
    from ..pipeline import analyse_file, band_layout, search_window
    from ..profiles import load_profile
    from ..signal.events import ONSET_FRAME_S, ONSET_HOP_S, window_search_frames
    from ..signal.spectra import slice_grid

    with tempfile.TemporaryDirectory(prefix="harken-bench-") as tmp:
        generate(tmp, scenario="small", seed=1234)
        files = sorted(Path(tmp).rglob("*.flac"))[:n_files]
        if not files:
            raise SystemExit("bench analyse: the generator wrote no recordings")
        profile = load_profile("demo-dpi")

        # One analysis pass first: it gives the frame plans of the floor and the peer (same frames, same grids).
        plans, whole_plans, peer_plans = [], [], []
        for path in files:
            res = analyse_file(path, profile=profile)
            fs = res.sample_rate_hz
            n_flux = int(round(ONSET_FRAME_S * fs))  # the onset search's frames
            n_hop = int(round(ONSET_HOP_S * fs))
            total = int(round(res.duration_s * fs))
            timings = {ev.name: ev for ev in res.events}
            plan, background = [], None
            for spec in profile.events:  # the windows and the stretch analysis.pipeline searches
                window = search_window(spec, res.markers_s, timings)
                if isinstance(window, tuple) and math.isfinite(window[0]):
                    background = background or (window[0] - profile.quality.background_max_s, window[0])
                    if spec.detector == "flux" and window[1] > window[0]:
                        plan.append((n_flux, window_search_frames(
                            n_samples=total, sample_rate_hz=fs, search_start_s=window[0], search_stop_s=window[1],
                            background_start_s=background[0], background_stop_s=background[1])))
            whole = [(n_flux, np.arange(0, max(total - n_flux, 0) + 1, n_hop))]
            pplan = []
            for spec in profile.events:
                n_win = int(round(spec.slice_window_s * fs))
                hop = int(round(spec.slice_hop_s * fs))
                layout = band_layout(spec.bands)
                pplan.append((n_win, hop, layout.lower_hz, layout.upper_hz))
                ev = res.event(spec.name)
                if ev.found:  # the very frames the feature step takes (signal.spectra.slice_grid)
                    grid = slice_grid(onset_s=ev.onset_s, length_s=spec.length_s, slice_window_s=spec.slice_window_s,
                                      slice_hop_s=spec.slice_hop_s, sample_rate_hz=fs, n_samples=total)
                    plan.append((grid.n_window, np.asarray(grid.starts)))
                    whole.append(plan[-1])
            plans.append(plan)
            whole_plans.append(whole)
            peer_plans.append(pplan)

        def ours():
            for path in files:
                analyse_file(path, profile=profile)

        windows = {n: scipy.signal.get_window("hann", n).astype(np.float32)
                   for plan in plans + whole_plans for n, _ in plan}

        def floor():
            for path, plan in zip(files, plans):
                _floor_one(path, plan, windows)

        def peer():
            for path, pplan in zip(files, peer_plans):
                _peer_one(path, pplan)

        def whole_floor():
            for path, plan in zip(files, whole_plans):
                _floor_one(path, plan, windows)

        t_ours, t_floor, t_peer, t_whole = interleaved_best([ours, floor, peer, whole_floor], repeat)

    n = len(files)
    result = {
        "files": n,
        "ms_per_recording": 1e3 * t_ours / n,
        "floor_ms_per_recording": 1e3 * t_floor / n,
        "peer_ms_per_recording": 1e3 * t_peer / n,
        "whole_flux_floor_ms_per_recording": 1e3 * t_whole / n,
        "ratio_to_floor": t_ours / t_floor,
        "ratio_to_whole_flux_floor": t_ours / t_whole,
        "speedup_vs_peer": t_peer / t_ours,
    }
    out(f"recordings analysed: {n} (demo scenario 'small', best of {repeat})")
    out(f"analysis: {result['ms_per_recording']:.2f} ms per recording "
        "(decode, quality checks, events, spectra, band features)")
    out(f"floor:    {result['floor_ms_per_recording']:.2f} ms per recording "
        "(decode + bare numpy FFTs of the same frames: the onset windows' flux frames and the events' slices)")
    out(f"peer:     {result['peer_ms_per_recording']:.2f} ms per recording "
        "(decode + scipy.signal.spectrogram of the whole file per event grid + numpy band averaging)")
    out(f"older floor: {result['whole_flux_floor_ms_per_recording']:.2f} ms per recording "
        "(decode + bare numpy FFTs of the whole recording's flux frames and the events' slices)")
    out(f"ratio_to_whole_flux_floor={result['ratio_to_whole_flux_floor']:.3f}")
    out(f"ratio_to_floor={result['ratio_to_floor']:.3f}")
    out(f"speedup_vs_peer={result['speedup_vs_peer']:.3f}")
    return result


# --------------------------------------------------------------------------------------------------- score


def bench_score(*, n_actuations: int = 10_000, n_slices: int = 40, n_bands: int = 30, repeat: int = 5,
                out=print) -> dict:
    """Score n_actuations x n_slices x n_bands against a fitted model vs the bare matrix products of that size."""
    from ..monitor import ReferenceModel

    rng = np.random.default_rng(7)
    n_ref = 200
    latent = rng.standard_normal((n_ref, n_slices, 4))
    mixing = rng.standard_normal((4, n_bands))
    ref = latent @ mixing + 0.3 * rng.standard_normal((n_ref, n_slices, n_bands))
    model = ReferenceModel(n_components=4).fit(ref)
    new = rng.standard_normal((n_actuations, n_slices, 4)) @ mixing + 0.3 * rng.standard_normal(
        (n_actuations, n_slices, n_bands)
    )
    a = model.n_components_
    p = np.asarray(model.loadings_)
    flat = new.reshape(-1, n_bands)

    def floor():
        z = ((new - model.mean_) / model.scale_).reshape(-1, n_bands)  # mean_/scale_ broadcast per slice
        t = z @ p
        e = z - t @ p.T
        (t * t / model.eigenvalues_).sum(axis=1)
        (e * e).sum(axis=1)

    def ours():
        model.score(new)

    t_ours, t_floor = interleaved_best([ours, floor], repeat)
    result = {
        "rows": flat.shape[0],
        "score_s": t_ours,
        "floor_s": t_floor,
        "ratio_to_floor": t_ours / t_floor,
    }
    out(f"scored {n_actuations} actuations x {n_slices} slices x {n_bands} bands, {a} components (best of {repeat})")
    out(f"score:  {t_ours * 1e3:.3f} ms (T², SPE, envelope, trajectory distance, actuation decision)")
    out(f"floor:  {t_floor * 1e3:.3f} ms (scaling + the bare matrix products for scores, residuals, T², SPE)")
    out(f"ratio_to_floor={result['ratio_to_floor']:.3f}")
    return result
