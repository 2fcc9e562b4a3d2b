"""The one-visit curves saved beside a plan, and which of them a later run may reuse.

Re-planning at the telescope recomputes nothing it does not have to: the bits of a target whose
posterior, grid and exposure options are unchanged, and whose observable starts are a subset of
the saved ones, are taken from ``curves.npz``.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from planner.workflow.prepared import PreparedRun

__all__ = ["curves_bytes", "load_curves", "reusable_curves", "save_curves"]


def _posterior_key(posterior) -> str:
    return f"{posterior.data_digest}:{posterior.seed}:{posterior.samples.shape[0]}"


def curves_bytes(run: PreparedRun) -> bytes:
    """Return the ``curves.npz`` content of a run: its one-visit bits, for re-planning."""
    import io

    buffer = io.BytesIO()
    np.savez_compressed(
        buffer, times_jd=run.sky.times_jd, exposures=np.asarray(run.exposures),
        targets=np.array([t.id for t in run.scenario.targets]),
        keys=np.array([_posterior_key(run.posteriors[t.id]) for t in run.scenario.targets]),
        observable=run.observable,
        bits=run.bits if run.exact_bits is None else run.exact_bits)
    return buffer.getvalue()


def save_curves(run: PreparedRun, path: str | Path) -> None:
    """Keep a run's one-visit bits beside its plan (atomic ``curves.npz``) for re-planning."""
    from planner.workflow.outputs import atomic_write_bytes

    atomic_write_bytes(path, curves_bytes(run))


def load_curves(path: str | Path) -> dict | None:
    """Read curves saved by :func:`save_curves`; None if the file is missing or unreadable."""
    try:
        with np.load(Path(path), allow_pickle=False) as data:
            return {key: data[key] for key in data.files}
    except (OSError, ValueError, KeyError):
        return None


def reusable_curves(saved, scenario, sky, exposures, observable, posteriors) -> dict:
    """Targets whose saved bits still hold: same grid, options and posterior, fewer starts."""
    if not saved or saved["times_jd"].shape != sky.times_jd.shape:
        return {}
    if not (np.allclose(saved["times_jd"], sky.times_jd, rtol=0, atol=1e-9)
            and np.array_equal(saved["exposures"], np.asarray(exposures))):
        return {}
    index = {str(name): k for k, name in enumerate(saved["targets"])}
    out = {}
    for s, target in enumerate(scenario.targets):
        k = index.get(target.id)
        if k is None or str(saved["keys"][k]) != _posterior_key(posteriors[target.id]):
            continue
        if np.any(observable[:, s] & ~saved["observable"][:, k]):
            continue
        out[s] = saved["bits"][:, k]
    return out
