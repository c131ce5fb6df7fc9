import numpy as np
import pytest

from pkasite.models.calibration import ConformalCalibrator, conformal_quantile
from pkasite.models.domain import similarity_bin, tanimoto_max


def test_conformal_intervals_reach_nominal_coverage_on_fresh_data():
    # Split-conformal guarantee (Vovk et al. 2005; Lei et al., JASA 2018): coverage >= level
    # for exchangeable data; checked here on simulated normal residuals.
    rng = np.random.default_rng(0)
    cal = ConformalCalibrator(levels=(0.8, 0.9)).fit(np.abs(rng.normal(0, 1, 2000)), ["a"] * 2000)
    fresh = np.abs(rng.normal(0, 1, 20000))
    for level in (0.8, 0.9):
        cover = np.mean(fresh <= cal.half_width(["a"] * len(fresh), level))
        assert level - 0.02 <= cover <= level + 0.03
    # the 90% half-width of |N(0,1)| is the normal 95th percentile, 1.645 (standard normal table)
    assert cal.half_width(["a"], 0.9)[0] == pytest.approx(1.645, abs=0.1)


def test_small_groups_fall_back_to_all_residuals():
    r = np.r_[np.full(100, 0.5), np.full(10, 5.0)]
    g = np.r_[["big"] * 100, ["tiny"] * 10]
    cal = ConformalCalibrator(levels=(0.9,), min_group=50).fit(r, g)
    assert cal.half_width(["tiny"], 0.9)[0] == pytest.approx(conformal_quantile(r, 0.9))
    assert cal.half_width(["big"], 0.9)[0] == pytest.approx(0.5)
    with pytest.raises(ValueError, match="level 0.95 was not calibrated"):
        cal.half_width(["big"], 0.95)
    assert ConformalCalibrator.from_dict(cal.to_dict()).half_width(["big"], 0.9)[0] == pytest.approx(0.5)


def test_tanimoto_matches_rdkit():
    from rdkit import DataStructs
    from rdkit.Chem import rdFingerprintGenerator
    from rdkit import Chem
    gen = rdFingerprintGenerator.GetMorganGenerator(radius=2, fpSize=512)
    mols = [Chem.MolFromSmiles(s) for s in ("CCO", "CCCO", "c1ccccc1O", "CC(=O)O")]
    fps = [gen.GetFingerprint(m) for m in mols]
    arr = np.stack([gen.GetFingerprintAsNumPy(m) for m in mols])
    got = tanimoto_max(arr[:1], arr[1:])
    want = max(DataStructs.BulkTanimotoSimilarity(fps[0], fps[1:]))
    assert got[0] == pytest.approx(want)


def test_similarity_bins():
    assert list(similarity_bin(np.array([0.0, 0.29, 0.3, 0.69, 1.0]))) == [
        "sim_0.0-0.3", "sim_0.0-0.3", "sim_0.3-0.5", "sim_0.5-0.7", "sim_0.7-1.0"]
