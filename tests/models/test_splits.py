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


def test_group_kfold_folds_do_not_move_when_other_groups_come_and_go():
    """A group's fold depends on its name and the seed: dropping 15 of 5,000 molecules (a curation fix)
    or adding 20 (new in-house measurements) leaves almost every other molecule in its fold, so CV
    figures before and after compare the same folds."""
    rng = np.random.default_rng(7)
    names = np.array([f"MOL{i:05d}" for i in range(5000)])

    def folds(groups):
        return {g: f for f, (_, te) in enumerate(group_kfold(groups, 5, seed=42)) for g in np.asarray(groups)[te]}

    before = folds(names)
    fewer = folds(np.delete(names, rng.choice(5000, 15, replace=False)))
    more = folds(np.r_[names, [f"NEW{i}" for i in range(20)]])
    for after in (fewer, more):
        moved = sum(before[g] != f for g, f in after.items() if g in before)
        assert moved <= 40, moved  # a few next to each of the four cuts; a reshuffle would move ~4,000
        sizes = np.bincount(list(after.values()))
        assert sizes.max() - sizes.min() <= 2
    # large groups (a scaffold shared by many molecules) are spread over the folds first
    groups = np.r_[np.repeat("acyclic", 900), np.repeat("benzene", 400), names[:3700]]
    sizes = [len(te) for _, te in group_kfold(groups, 5, seed=1)]
    assert max(sizes) - min(sizes) <= 2


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
