"""A folder of fitted posteriors keyed on data, model, settings, seed, target and sampler.

The key is the sha256 of a canonical JSON document holding the data digest, the model, the
sampler settings, the seed, the target id, the sampler's algorithm version
(:data:`inference.sample.SAMPLER_VERSION`) and the posterior format version, so any change to
one of them gives a new key and unchanged targets are not refitted.

The cache never blocks a run: a damaged entry (truncated, bit-flipped), an entry whose stored
key or target does not match the one asked for, or a folder that cannot be read is a miss,
logged as a warning that names the file; the target is refitted and its entry rewritten
atomically.
"""

import dataclasses
import hashlib
import json
import logging
from pathlib import Path

from . import sample
from .errors import InferenceError
from .posterior import FORMAT_VERSION, Posterior

__all__ = ["FitCache", "cache_key"]

logger = logging.getLogger(__name__)


def cache_key(data_digest, model, settings, seed, target="", sampler_version=None):
    """Hex sha256 key of one fit.

    Parameters
    ----------
    data_digest : str
        ``RVData.digest`` of the data.
    model : ModelSpec
    settings : SamplerSettings
    seed : int
    target : str, optional
        Name of the star (two stars never share an entry, even with equal data).
    sampler_version : str, optional
        Version of the sampling algorithm; None (default) reads
        :data:`inference.sample.SAMPLER_VERSION` at call time.

    Returns
    -------
    str
        64 hexadecimal digits.
    """
    if sampler_version is None:
        sampler_version = sample.SAMPLER_VERSION
    doc = {
        "data": data_digest,
        "model": model.to_dict(),
        "settings": settings.to_dict(),
        "seed": int(seed),
        "target": str(target),
        "sampler_version": str(sampler_version),
        "format_version": FORMAT_VERSION,
    }
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


class FitCache:
    """Posterior files under one folder, one ``<key>.npz`` per fit.

    Parameters
    ----------
    directory : str or path-like
        Folder of the cache (created on the first write).
    """

    def __init__(self, directory):
        self.directory = Path(directory)

    def path(self, key):
        """Path of the file for `key`."""
        return self.directory / f"{key}.npz"

    def get(self, key, target=None):
        """Return the cached posterior for `key`, or None on a miss.

        A missing file is a silent miss. A damaged file, a file written under another key or
        for another target, or a file that cannot be read is a miss logged as a warning that
        names the file; the next :meth:`put` overwrites it.

        Parameters
        ----------
        key : str
            Key from :func:`cache_key`.
        target : str, optional
            Name of the star expected in the file; None skips that check.

        Returns
        -------
        Posterior or None
        """
        path = self.path(key)
        try:
            if not path.exists():
                return None
            posterior = Posterior.load(path)
        except InferenceError as exc:
            logger.warning("ignoring damaged cache entry %s (refitting): %s", path, exc)
            return None
        except Exception as exc:  # a cache entry must never stop a run
            logger.warning(
                "ignoring unreadable cache entry %s (refitting): %s: %s",
                path, type(exc).__name__, exc,
            )
            return None
        if posterior.cache_key != key:
            logger.warning(
                "ignoring cache entry %s (refitting): it was stored under key %s, not under its "
                "file name", path, posterior.cache_key,
            )
            return None
        if target is not None and posterior.target != target:
            logger.warning(
                "ignoring cache entry %s (refitting): it holds target %r, not %r",
                path, posterior.target, target,
            )
            return None
        return posterior

    def put(self, key, posterior):
        """Store `posterior` under `key`, recording the key in the file; return its path.

        The file is written atomically (temporary file in the same folder, fsync,
        ``os.replace``), so a damaged or foreign entry is replaced whole.

        Parameters
        ----------
        key : str
            Key from :func:`cache_key`.
        posterior : Posterior

        Returns
        -------
        pathlib.Path

        Raises
        ------
        OSError
            If the folder cannot be created or written (e.g. read-only).
        """
        self.directory.mkdir(parents=True, exist_ok=True)
        path = self.path(key)
        dataclasses.replace(posterior, cache_key=key).save(path)
        return path
