"""Several campaigns ranked and reported as one: the union of their runs (a run two campaigns
hold counts once), a method defined once across them. The reference is a third campaign
that holds exactly that union (its own campaign file, with both grids as sub-sweeps): every
table must come out the same."""
import io
from contextlib import redirect_stderr, redirect_stdout
from html.parser import HTMLParser

import pandas as pd
import pytest

import stopwise
from stopwise.analysis.rank import rank_campaign
from stopwise.analysis.rule_comparison import compare_campaign
from stopwise.cli import main
from stopwise.results.store import Store

COMMON = "budget:\n  iterations: 40\n"
A = ("# @package _global_\n" + COMMON + "hydra:\n  sweeper:\n    params:\n      dataset: wellposed,illposed\n"
     "      solver: gd\n      solver.step_scale: 0.5,1.0\n      seed: 0,1\n")
# nesterov on both datasets, and one gd run that camp_a holds too
B_SUBS = ("sweeps:\n  - dataset: wellposed,illposed\n    solver: nesterov\n    solver.step_scale: 1.0\n"
          "    seed: 0,1\n  - dataset: illposed\n    solver: gd\n    solver.step_scale: 1.0\n    seed: 1\n")
B = "# @package _global_\n" + COMMON + B_SUBS
UNION = ("# @package _global_\n" + COMMON + B_SUBS + "  - dataset: wellposed,illposed\n    solver: gd\n"
         "    solver.step_scale: 0.5,1.0\n    seed: 0,1\n")


def cli(*args):
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(list(args))
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def root(tmp_path_factory):
    base = tmp_path_factory.mktemp("several")
    root = base / "results"
    for name, text in (("camp_a", A), ("camp_b", B), ("camp_union", UNION)):
        (base / f"{name}.yaml").write_text(text)
        code, out, err = cli("sweep", str(base / f"{name}.yaml"), f"results_root={root}")
        assert code == 0, err
    return root


def test_the_campaigns_overlap_in_exactly_one_run_and_the_union_campaign_holds_them_all(root):
    store = Store(root)
    a, b, u = (set(store.find_campaign(n)["run_ids"]) for n in ("camp_a", "camp_b", "camp_union"))
    assert len(a) == 8 and len(b) == 5 and len(a & b) == 1 and a | b == u


def test_ranking_two_campaigns_equals_ranking_the_campaign_of_their_union(root):
    two = rank_campaign(root, ["camp_a", "camp_b"], "holdout", baselines="ensure")
    one = rank_campaign(root, "camp_union", "holdout", baselines="stored")
    for name in ("table", "ranks", "pairwise", "costs", "performance", "data"):
        pd.testing.assert_frame_equal(getattr(two, name), getattr(one, name), obj=name)
    key = ["dataset", "method", "seed"]
    pd.testing.assert_frame_equal(two.replicates.sort_values(key).reset_index(drop=True),
                                  one.replicates.sort_values(key).reset_index(drop=True))
    assert two.test == one.test and two.notes == one.notes
    # the shared run is counted once: gd on illposed has 2 seeds, not 3 rows for seed 1
    rep = two.replicates[(two.replicates.kind == "iterative")]
    assert rep.groupby(key).size().max() == 1
    # one method gd across both campaigns, tuned over the union of its configurations
    gd = two.table[(two.table.method == "gd") & (two.table.dataset == "illposed")]
    assert len(gd) == 1 and int(gd["seeds"].iloc[0]) == 2
    # naming a campaign twice is naming it once
    pd.testing.assert_frame_equal(rank_campaign(root, ["camp_a", "camp_a"], baselines="stored").table,
                                  rank_campaign(root, "camp_a", baselines="stored").table)
    c2, c1 = compare_campaign(root, ["camp_a", "camp_b"]), compare_campaign(root, "camp_union")
    pd.testing.assert_frame_equal(c2.table, c1.table)
    assert stopwise.select(root, ["camp_a", "camp_b"])["run_id"].nunique() == 12


def test_rank_command_takes_several_campaigns(root):
    code, two, err = cli("rank", "camp_a", "camp_b", "--root", str(root), "--baselines", "stored")
    assert code == 0, err
    code, one, err = cli("rank", "camp_union", "--root", str(root), "--baselines", "stored")
    assert code == 0, err
    assert two == one
    code, out, err = cli("rank", "camp_a", "nosuch", "--root", str(root))
    assert code == 2 and len(err.strip().splitlines()) == 1 and "nosuch" in err


class Text(HTMLParser):
    def __init__(self):
        super().__init__()
        self.parts = []

    def handle_data(self, data):
        self.parts.append(data)


def test_report_of_several_campaigns_states_each(root):
    code, out, err = cli("report", "camp_a", "camp_b", "--root", str(root), "--baselines", "stored")
    assert code == 0, err
    index = root / "reports" / "camp_a+camp_b" / "index.html"  # the default folder names both
    assert out.strip() == f"report: {index}"
    page = Text()
    page.feed(index.read_text())
    text = " ".join(page.parts)
    store = Store(root)
    for name, runs in (("camp_a", 8), ("camp_b", 5)):
        m = store.find_campaign(name)
        assert f"Campaign {name} ({m['campaign_id'][:16]}) under {root}: {runs} runs ({runs} completed)." in text
        assert f"# campaign {name} ({m['campaign_id'][:16]})" in text  # each definition as given
    assert "2 campaigns ranked as one: the union of their runs, 12 distinct runs (12 completed); 1 run listed by " \
           "more than one campaign counts once" in text
    assert "stopwise report: campaigns camp_a + camp_b" in text
