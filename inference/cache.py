"""A folder of fitted posteriors keyed on data, model, settings and seed.

The key is the sha256 of a canonical JSON document holding the data digest, the model, the
sampler settings, the seed and the posterior format version, so any change to one of them
gives a new key and unchanged targets are not refitted.
"""

import hashlib
import json
import logging
from pathlib import Path

from .errors import InferenceError
from .posterior import FORMAT_VERSION, Posterior

__all__ = ["FitCache", "cache_key"]

logger = logging.getLogger(__name__)


def cache_key(data_digest, model, settings, seed):
    """Hex sha256 key of one fit.

    Parameters
    ----------
    data_digest : str
        ``RVData.digest`` of the data.
    model : ModelSpec
    settings : SamplerSettings
    seed : int

    Returns
    -------
    str
    """
    doc = {
        "data": data_digest,
        "model": model.to_dict(),
        "settings": settings.to_dict(),
        "seed": int(seed),
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

    def get(self, key):
        """Return the cached posterior for `key`, or None when absent or unreadable."""
        path = self.path(key)
        if not path.exists():
            return None
        try:
            return Posterior.load(path)
        except InferenceError as exc:
            logger.warning("ignoring unreadable cache entry %s: %s", path, exc)
            return None

    def put(self, key, posterior):
        """Store `posterior` under `key` (atomic write); return its path."""
        self.directory.mkdir(parents=True, exist_ok=True)
        path = self.path(key)
        posterior.save(path)
        return path
