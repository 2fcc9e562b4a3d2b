"""The Posterior record, its predictions and its on-disk format."""

import json

import numpy as np
import pytest

from inference.data import RVData
from inference.errors import InferenceError, ModelError
from inference.keplerian import radial_velocity
from inference.model import ModelSpec
from inference.posterior import Posterior
from inference.sample import fit
from inference.settings import SamplerSettings


@pytest.fixture(scope="module")
def posterior():
    rng = np.random.default_rng(4)
    t = np.sort(2460100.0 + rng.uniform(0.0, 90.0, 24))
    inst = np.where(np.arange(24) < 12, "blue", "red")
    rv = radial_velocity(t, 9.0, 15.0, 0.3, 0.5, 2460101.0) + np.where(inst == "blue", 4.0, -6.0)
    rv = rv + 0.05 * (t - 2460145.0) + rng.normal(0.0, 1.0, 24)
    data = RVData.from_arrays(t, rv, np.full(24, 1.0), inst, source="invented two-instrument")
    model = ModelSpec.for_data(data, trend=True, period_range=(2.0, 50.0))
    settings = SamplerSettings(n_samples=300, draws=2000, min_ess=300)
    return fit(data, model, settings, rng=8, target="invented-star"), data


def test_predict_matches_keplerian_plus_offset_and_trend(posterior):
    # Reference: the model definition v = K [cos(nu + w) + e cos w] + offset + trend (t - t_ref)
    # evaluated sample by sample with radial_velocity.
    post, _ = posterior
    t = np.linspace(2460100.0, 2460200.0, 7)
    got = post.predict(t, "red")
    assert got.shape == (post.n_samples, 7)
    i = 17
    row = dict(zip(post.names, post.samples[i], strict=True))
    ref = radial_velocity(
        t,
        row["period_1"],
        row["semi_amplitude_1"],
        row["eccentricity_1"],
        row["omega_1"],
        row["time_periastron_1"],
    )
    ref = ref + row["offset_red"] + row["trend"] * (t - post.model.t_ref)
    np.testing.assert_allclose(got[i], ref, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(post.jitter("blue"), post.param("jitter_blue"))
    with pytest.raises(ModelError, match="not in the model"):
        post.predict(t, "green")
    with pytest.raises(ModelError, match="no parameter"):
        post.param("period_7")


def test_log_likelihood_is_the_gaussian_of_the_residuals(posterior):
    # Reference: scipy-free closed form of the independent Gaussian log density.
    post, data = posterior
    i = 5
    pred = post.predict(data.time, "blue")[i]
    red = data.instrument == "red"
    pred[red] = post.predict(data.time[red], "red")[i]
    jit = np.where(red, post.jitter("red")[i], post.jitter("blue")[i])
    var = data.rv_err**2 + jit**2
    ref = -0.5 * np.sum((data.rv - pred) ** 2 / var + np.log(2 * np.pi * var))
    assert post.log_likelihood[i] == pytest.approx(ref, rel=1e-12)


def test_save_load_round_trip(posterior, tmp_path):
    post, data = posterior
    path = tmp_path / "invented-star.npz"
    post.save(path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["invented-star.npz"]  # no temp file
    back = Posterior.load(path)
    np.testing.assert_array_equal(back.samples, post.samples)
    np.testing.assert_array_equal(back.log_likelihood, post.log_likelihood)
    assert back.model == post.model and back.names == post.names
    assert back.seed == post.seed and back.data_digest == data.digest
    assert back.diagnostics == post.diagnostics and back.settings == post.settings
    with np.load(path, allow_pickle=False) as npz:
        meta = json.loads(str(npz["metadata"]))
    assert meta["format"] == "nightbits-posterior" and meta["format_version"] == "2.0"


def test_bad_files_give_a_sentence(posterior, tmp_path):
    post, _ = posterior
    with pytest.raises(InferenceError, match="does not exist"):
        Posterior.load(tmp_path / "missing.npz")
    junk = tmp_path / "junk.npz"
    junk.write_bytes(b"not a zip file")
    with pytest.raises(InferenceError, match="not a readable posterior file"):
        Posterior.load(junk)
    other = tmp_path / "other.npz"
    # 1.1: the earlier sampler's diagnostics; 3.0: a future format.
    for version, match in (("1.1", "version '1.1'.*refit"), ("3.0", "version '3.0'")):
        meta = post.metadata() | {"format_version": version}
        np.savez(
            other,
            samples=post.samples,
            log_likelihood=post.log_likelihood,
            metadata=np.array(json.dumps(meta)),
        )
        with pytest.raises(InferenceError, match=match):
            Posterior.load(other)
