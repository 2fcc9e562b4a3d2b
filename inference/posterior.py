"""The :class:`Posterior` record of one star and its on-disk format (docs/posterior-format.md).

A posterior is one ``.npz`` file holding the arrays ``samples`` and ``log_likelihood`` and a
JSON document ``metadata`` (model, names, data digest, seed, settings, diagnostics, format
version), written atomically (temporary file in the same folder, then ``os.replace``).
"""

import io
import json
import os
import tempfile
import zipfile
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from inference.diagnostics import Diagnostics
from inference.settings import SamplerSettings

from .errors import InferenceError, ModelError
from .keplerian import radial_velocity
from .model import ModelSpec

__all__ = ["FORMAT_VERSION", "Posterior", "current_umask", "predict_matrix"]

#: Version of the on-disk format; readers refuse files with another major version.
#: 1.1 added the optional ``cache_key`` entry of the metadata; 2.0 has the diagnostics of the
#: importance sampler (sampler version 2).
FORMAT_VERSION = "2.0"

#: What reading a damaged (truncated, bit-flipped) ``.npz`` can raise besides OSError.
_DAMAGED = (
    OSError, KeyError, ValueError, IndexError, EOFError, TypeError, zipfile.BadZipFile, zlib.error
)


def predict_matrix(samples, model, t, instrument):
    """Model velocities of complete samples at given times.

    Parameters
    ----------
    samples : ndarray, shape (n_samples, n_params)
        Complete samples in ``model.parameter_names()`` order.
    model : ModelSpec
    t : array_like, shape (n_times,)
        Times, BJD_TDB [d].
    instrument : str or sequence of str, shape (n_times,)
        Instrument whose offset applies (one name for all times, or one per time).

    Returns
    -------
    v : ndarray, shape (n_samples, n_times)
        Velocities [m/s]: Keplerians plus offset plus trend.
    """
    t = np.atleast_1d(np.asarray(t, dtype=float))
    names = model.parameter_names()
    col = {n: i for i, n in enumerate(names)}
    if isinstance(instrument, str):
        instrument = [instrument] * t.size
    unknown = sorted(set(instrument) - set(model.instruments))
    if unknown:
        raise ModelError(
            f"instrument {unknown[0]!r} is not in the model (it has {list(model.instruments)}): "
            "use one of those names."
        )
    offsets = samples[:, [col[f"offset_{i}"] for i in model.instruments]]
    lookup = {name: k for k, name in enumerate(model.instruments)}
    v = offsets[:, [lookup[i] for i in instrument]].copy()
    for k in range(1, model.n_planets + 1):
        p = [samples[:, col[f"{n}_{k}"], None] for n in ("period", "semi_amplitude")]
        e, w, tp = (
            samples[:, col[f"{n}_{k}"], None] for n in ("eccentricity", "omega", "time_periastron")
        )
        v += radial_velocity(t, p[0], p[1], e, w, tp)
    if model.trend:
        v += samples[:, col["trend"], None] * (t - model.t_ref)
    return v


@dataclass(frozen=True, eq=False)
class Posterior:
    """Equal-weight posterior samples of one star's complete model.

    Attributes
    ----------
    target : str
        Name of the star.
    model : ModelSpec
        The model sampled.
    names : tuple of str
        Column names of `samples` (``model.parameter_names()``).
    samples : ndarray, shape (n_samples, n_params)
        Complete samples: periods [d], semi-amplitudes [m/s], eccentricities, omegas [rad],
        times of periastron [BJD_TDB d], offsets [m/s], jitters [m/s], trend [m/s/d].
    log_likelihood : ndarray, shape (n_samples,)
        Gaussian log-likelihood of the data at each complete sample.
    data_digest : str
        ``RVData.digest`` of the data fitted.
    seed : int
        Seed that reproduces the fit (``fit(..., rng=seed)``).
    diagnostics : Diagnostics
        How the sampling went.
    settings : SamplerSettings or None
        Settings of the fit.
    cache_key : str or None
        Key of the cache entry this record is stored under (:func:`inference.cache.cache_key`),
        or None outside a cache.
    """

    target: str
    model: ModelSpec
    names: tuple
    samples: np.ndarray
    log_likelihood: np.ndarray
    data_digest: str
    seed: int
    diagnostics: object
    settings: object = None
    cache_key: str | None = None

    def __post_init__(self):
        for arr in (self.samples, self.log_likelihood):
            arr.flags.writeable = False

    @property
    def n_samples(self):
        """Int: number of samples."""
        return int(self.samples.shape[0])

    def param(self, name):
        """Return the samples of one parameter, shape (n_samples,).

        Parameters
        ----------
        name : str
            One of `names`.
        """
        if name not in self.names:
            raise ModelError(
                f"posterior of {self.target!r} has no parameter {name!r}: use one of "
                f"{list(self.names)}."
            )
        return self.samples[:, self.names.index(name)]

    def predict(self, t, instrument):
        """Return predicted velocities, shape (n_samples, n_times) [m/s], offset and trend included.

        Parameters
        ----------
        t : array_like, shape (n_times,)
            Times, BJD_TDB [d].
        instrument : str
            Instrument whose offset applies.
        """
        return predict_matrix(self.samples, self.model, t, instrument)

    def jitter(self, instrument):
        """Return the jitter samples of one instrument, shape (n_samples,) [m/s]."""
        return self.param(f"jitter_{instrument}")

    # ----- on-disk format -----------------------------------------------------------------
    def metadata(self):
        """Return the JSON metadata document of the on-disk format."""
        return {
            "format": "nightbits-posterior",
            "format_version": FORMAT_VERSION,
            "target": self.target,
            "names": list(self.names),
            "model": self.model.to_dict(),
            "data_digest": self.data_digest,
            "seed": self.seed,
            "settings": self.settings.to_dict() if self.settings is not None else None,
            "diagnostics": self.diagnostics.to_dict(),
            "cache_key": self.cache_key,
        }

    def save(self, path):
        """Write the posterior to `path` (``.npz``) atomically.

        Parameters
        ----------
        path : str or path-like
            Destination; its folder must exist.
        """
        path = Path(path)
        folder = path.parent
        buf = io.BytesIO()
        np.savez(
            buf,
            samples=np.asarray(self.samples),
            log_likelihood=np.asarray(self.log_likelihood),
            metadata=np.array(json.dumps(self.metadata(), sort_keys=True)),
        )
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
        try:
            # mkstemp makes the file 0600; a cache entry gets the umask's mode, like any file.
            os.fchmod(fd, 0o666 & ~current_umask())
            with os.fdopen(fd, "wb") as fh:
                fh.write(buf.getvalue())
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, path)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
        _fsync_folder(folder)

    @classmethod
    def load(cls, path):
        """Read a posterior written by :meth:`save`.

        Parameters
        ----------
        path : str or path-like

        Returns
        -------
        Posterior

        Raises
        ------
        InferenceError
            If the file is missing, not a posterior file, or of another format version.
        """
        path = Path(path)
        try:
            # Open the file here: np.load leaks its own handle when the zip is damaged.
            with open(path, "rb") as fh, np.load(fh, allow_pickle=False) as npz:
                samples = np.array(npz["samples"], dtype=float)
                log_l = np.array(npz["log_likelihood"], dtype=float)
                meta = json.loads(str(npz["metadata"]))
        except FileNotFoundError:
            raise InferenceError(
                f"posterior file {path} does not exist: fit the target first."
            ) from None
        except _DAMAGED as exc:
            raise InferenceError(
                f"{path} is not a readable posterior file ({type(exc).__name__}: {exc}): delete "
                "it and refit."
            ) from None
        if not isinstance(meta, dict):
            raise InferenceError(
                f"{path} is not a readable posterior file (its metadata is not a JSON object): "
                "delete it and refit."
            )
        version = str(meta.get("format_version", ""))
        major = FORMAT_VERSION.split(".")[0]
        if meta.get("format") != "nightbits-posterior" or version.split(".")[0] != major:
            raise InferenceError(
                f"{path} has format {meta.get('format')!r} version {version!r}, not "
                f"nightbits-posterior {FORMAT_VERSION}: refit the target to rewrite it."
            )
        try:
            settings = meta.get("settings")
            names = tuple(meta["names"])
            if samples.ndim != 2 or samples.shape[1] != len(names) or log_l.shape != (
                samples.shape[0],
            ):
                raise ValueError(
                    f"samples of shape {samples.shape} and log_likelihood of shape "
                    f"{log_l.shape} do not fit {len(names)} parameter names"
                )
            key = meta.get("cache_key")
            return cls(
                target=str(meta["target"]),
                model=ModelSpec.from_dict(meta["model"]),
                names=names,
                samples=samples,
                log_likelihood=log_l,
                data_digest=str(meta["data_digest"]),
                seed=int(meta["seed"]),
                diagnostics=Diagnostics.from_dict(meta["diagnostics"]),
                settings=SamplerSettings(**settings) if settings else None,
                cache_key=None if key is None else str(key),
            )
        except InferenceError:
            raise
        except (KeyError, ValueError, TypeError, AttributeError) as exc:
            raise InferenceError(
                f"{path} is not a readable posterior file ({type(exc).__name__}: {exc}): delete "
                "it and refit."
            ) from None


def current_umask() -> int:
    """Return the process's file-creation mask (read from /proc where possible, else set back)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _fsync_folder(folder):
    """Flush a folder's entry list to disk after a rename (best effort: not every OS can)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
