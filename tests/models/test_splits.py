import numpy as np
import pytest

from pkasite.models.splits import ACYCLIC, group_kfold, leave_one_group_out, murcko_scaffold


def test_group_kfold_keeps_groups_together_and_covers_all_rows():
    rng = np.random.default_rng(0)
    groups = rng.integers(0, 60, size=500).astype(str)
    seen = np.zeros(500, int)
    for train, test in group_kfold(groups, 5, seed=1):
        assert not set(groups[train]) & set(groups[test])
        seen[test] += 1
    assert (seen == 1).all()


def test_group_kfold_is_balanced_and_seeded():
    groups = np.repeat(np.arange(100), 3).astype(str)
    sizes = [len(te) for _, te in group_kfold(groups, 5, seed=3)]
    assert max(sizes) - min(sizes) <= 3
    a = [te.tolist() for _, te in group_kfold(groups, 5, seed=3)]
    b = [te.tolist() for _, te in group_kfold(groups, 5, seed=3)]
    c = [te.tolist() for _, te in group_kfold(groups, 5, seed=4)]
    assert a == b and a != c


def test_group_kfold_needs_enough_groups():
    with pytest.raises(ValueError, match="3 groups cannot make 5 folds"):
        list(group_kfold(["a", "b", "c"], 5, seed=0))


def test_leave_one_group_out_respects_min_size():
    groups = np.array(["x"] * 30 + ["y"] * 5 + ["z"] * 40)
    out = list(leave_one_group_out(groups, min_size=25))
    assert [name for name, _, _ in out] == ["x", "z"]
    for name, train, test in out:
        assert (groups[test] == name).all() and not (groups[train] == name).any()


def test_murcko_scaffold():
    # Bemis & Murcko, J. Med. Chem. 39, 2887 (1996): side chains removed, ring systems and linkers kept;
    # RDKit's MurckoScaffold is the reference implementation used here.
    assert murcko_scaffold("CCOC(=O)c1ccccc1") == "c1ccccc1"
    assert murcko_scaffold("OC(=O)Cc1ccc(Cc2ccccn2)cc1") == "c1ccc(Cc2ccccn2)cc1"
    assert murcko_scaffold("CCCC(=O)O") == ACYCLIC
