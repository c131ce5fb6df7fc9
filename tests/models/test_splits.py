import numpy as np
import pytest

from pkasite.models.splits import ACYCLIC, group_kfold, leave_one_group_out, murcko_scaffold, unseen_group_folds


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


def test_unseen_group_folds_hold_each_big_group_out_once():
    rng = np.random.default_rng(0)
    sizes = {"a": 50, "b": 45, "c": 30, "d": 80, "e": 41, "f": 60, "g": 10, "h": 39}
    groups = rng.permutation(np.concatenate([[g] * n for g, n in sizes.items()]))
    out = list(unseen_group_folds(groups, min_size=40, n_splits=3, seed=1))
    assert len(out) == 3
    tested = [set(groups[test]) for _, _, test in out]
    # every group of >= 40 rows is tested in exactly one fold, the smaller ones never
    assert sorted(g for t in tested for g in t) == ["a", "b", "d", "e", "f"]
    for (_, train, test), held in zip(out, tested):
        assert not set(groups[train]) & held  # a held-out group is absent from training altogether
        assert len(train) + len(test) == len(groups)
    assert {"g", "h", "c"} <= set(groups[out[0][1]])


def test_unseen_group_folds_zero_is_leave_one_group_out():
    groups = np.array(["x"] * 30 + ["y"] * 5 + ["z"] * 40)
    loo = [(n, list(tr), list(te)) for n, tr, te in leave_one_group_out(groups, 25)]
    assert [(n, list(tr), list(te)) for n, tr, te in unseen_group_folds(groups, 25, 0, seed=0)] == loo
    # more folds than eligible groups falls back to one fold per group as well
    assert [n for n, _, _ in unseen_group_folds(groups, 25, 5, seed=0)] == ["x", "z"]


def test_murcko_scaffold():
    # Bemis & Murcko, J. Med. Chem. 39, 2887 (1996): side chains removed, ring systems and linkers kept;
    # RDKit's MurckoScaffold is the reference implementation used here.
    assert murcko_scaffold("CCOC(=O)c1ccccc1") == "c1ccccc1"
    assert murcko_scaffold("OC(=O)Cc1ccc(Cc2ccccn2)cc1") == "c1ccc(Cc2ccccn2)cc1"
    assert murcko_scaffold("CCCC(=O)O") == ACYCLIC
