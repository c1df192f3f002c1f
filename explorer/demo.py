"""The invented demo cohort: older adults with an acute abdominal emergency, laparotomy or non-operative care.

Every patient is made up. The generating model is simple enough that its true curves and break-even
points are known exactly, so estimates made from the demo can be checked against the truth.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize
from scipy.special import betainc, expit

from .outputs import make_folder, write_atomic

SEED = 20261201
N = 2400
ARMS = ("laparotomy", "non-operative")
LEVELS = ("independent", "home_with_help", "care_home", "bedbound", "dead")
FAVOURABLE = ("independent", "home_with_help")
CFS_CENTRE = 5.0
AGE_CENTRE = 80.0
YEAR = 365.0
FUNCTION_DAY = 182.0
HOME_WINDOW = 180.0
FILES = ("demo_cohort.csv", "demo.toml", "DICTIONARY.md", "truth.json", "local_patients.csv")
LOCAL_N = 300  # invented local patients (no outcomes) for the [target] section
_AGES = np.arange(65, 96)

PARAMS: dict = {
    "age": {"values": [65, 95], "beta_shape": [1.4, 2.6],
            "rule": "age = 65 + floor(31 * B), B ~ Beta(1.4, 2.6)"},
    "male": 0.45,
    "cfs_pmf": [0.03, 0.07, 0.12, 0.16, 0.18, 0.17, 0.14, 0.09, 0.04],
    "log_lactate": {"mean": 0.5878, "sd": 0.45},
    "albumin": {"mean": 34.0, "sd": 5.0},
    "hospitals": {
        "names": ["H1", "H2", "H3", "H4", "H5", "H6"],
        "share": [0.22, 0.19, 0.17, 0.16, 0.14, 0.12],
        "randomised": [0.20, 0.15, 0.12, 0.10, 0.08, 0.06],
        "log_hazard": [0.0, 0.10, -0.10, 0.15, -0.05, 0.05],
        "surgery_logit": [0.30, -0.20, 0.0, 0.40, -0.30, 0.10],
    },
    "hazard": {
        "laparotomy": {"a": -1.00, "b": 0.52},
        "non-operative": {"a": -0.48, "b": 0.28},
        "age": 0.02, "male": 0.15, "log_lactate": 0.40, "albumin_per_5": -0.10, "fitness": -0.35,
    },
    "function": {
        "laparotomy": {"cuts": [-0.50, 0.62, 2.00], "slope": 0.80},
        "non-operative": {"cuts": [-0.30, 1.00, 2.60], "slope": 0.55},
    },
    "choice": {"intercept": 0.35, "cfs": -0.75, "fitness": 0.90, "age": -0.03},
    "loss_per_year": 0.06,
    "stay_days": {"laparotomy": [9.0, 2.0, 3.5, 0.8], "non-operative": [4.0, 2.0, 2.0, 0.4]},
    "home_share": {"independent": 0.97, "home_with_help": 0.92, "care_home": 0.15, "bedbound": 0.50,
                   "dead": 0.50},
    "utility": {"mean": {"independent": 0.82, "home_with_help": 0.64, "care_home": 0.45, "bedbound": 0.18},
                "sd": 0.10, "range": [-0.3, 1.0], "nonresponse": 0.08},
}


def age_pmf(params: dict = PARAMS) -> np.ndarray:
    """P(age = 65..95): age = 65 + floor(31 B) with B ~ Beta(a, b)."""
    a, b = params["age"]["beta_shape"]
    cdf = betainc(a, b, (_AGES - 64) / 31.0)
    return np.diff(np.r_[0.0, cdf])


def _log_m_sd(params: dict) -> float:
    """SD of the normal part of the log hazard multiplier (lactate, albumin, unmeasured fitness)."""
    h = params["hazard"]
    return float(np.sqrt((h["log_lactate"] * params["log_lactate"]["sd"]) ** 2 + h["albumin_per_5"] ** 2
                         + h["fitness"] ** 2))


def randomised_mixture(params: dict = PARAMS) -> tuple[np.ndarray, np.ndarray]:
    """Discrete part of the log hazard multiplier among randomised patients: (offsets, probabilities)."""
    hosp = params["hospitals"]
    share = np.asarray(hosp["share"]) * np.asarray(hosp["randomised"])
    share = share / share.sum()
    male = params["male"]
    offsets = (np.asarray(hosp["log_hazard"])[:, None, None]
               + params["hazard"]["age"] * (_AGES - AGE_CENTRE)[None, :, None]
               + params["hazard"]["male"] * np.array([0.0, 1.0])[None, None, :])
    probs = share[:, None, None] * age_pmf(params)[None, :, None] * np.array([1 - male, male])[None, None, :]
    return offsets.ravel(), probs.ravel()


def true_survival(arm: str, cfs: float | np.ndarray, t: float, params: dict = PARAMS) -> np.ndarray:
    """P(alive at day t | arm, cfs), averaged over the randomised population (exact Gauss-Hermite)."""
    offsets, probs = randomised_mixture(params)
    z, w = np.polynomial.hermite_e.hermegauss(80)
    w = w / w.sum()
    log_m = (offsets[:, None] + _log_m_sd(params) * z[None, :]).ravel()
    weight = (probs[:, None] * w[None, :]).ravel()
    h = params["hazard"][arm]
    cfs = np.atleast_1d(np.asarray(cfs, float))
    cum = np.exp(h["a"] + h["b"] * (cfs - CFS_CENTRE)) * t / YEAR
    return np.exp(-cum[:, None] * np.exp(log_m)[None, :]) @ weight


def function_given_alive(arm: str, cfs: float | np.ndarray, params: dict = PARAMS) -> np.ndarray:
    """P(level | alive at day 182, arm, cfs) for the four living levels (proportional odds), shape (n, 4)."""
    f = params["function"][arm]
    cfs = np.atleast_1d(np.asarray(cfs, float))
    cum = expit(np.asarray(f["cuts"])[None, :] - f["slope"] * (cfs[:, None] - CFS_CENTRE))
    cum = np.column_stack([np.zeros(len(cfs)), cum, np.ones(len(cfs))])
    return np.diff(cum, axis=1)


def true_favourable(arm: str, cfs: float | np.ndarray, params: dict = PARAMS) -> np.ndarray:
    """P(independent or home with help at six months) = P(alive at 182) x P(favourable | alive)."""
    alive = true_survival(arm, cfs, FUNCTION_DAY, params)
    return alive * function_given_alive(arm, cfs, params)[:, :2].sum(axis=1)


def survival_break_even(params: dict = PARAMS) -> float:
    """Where the per-arm hazards are equal; the same for every covariate pattern, so exact for any mix."""
    one, two = (params["hazard"][a] for a in ARMS)
    return CFS_CENTRE + (two["a"] - one["a"]) / (one["b"] - two["b"])


def function_break_even(params: dict = PARAMS) -> float:
    """Where P(favourable function at six months) is equal in both arms, randomised population."""
    gap = lambda c: float(true_favourable(ARMS[0], c, params)[0] - true_favourable(ARMS[1], c, params)[0])  # noqa: E731
    return float(optimize.brentq(gap, 1.0, 9.0, xtol=1e-12))


def truth(params: dict = PARAMS) -> dict:
    """The generating model, its true curves at each CFS level and its break-even points."""
    key = json.dumps(params, sort_keys=True)
    if key not in _TRUTH:
        _TRUTH[key] = json.dumps(_truth(params))
    return json.loads(_TRUTH[key])


_TRUTH: dict[str, str] = {}


def _truth(params: dict) -> dict:
    cfs = np.arange(1, 10)
    curves = {arm: {"survival_365": _r(true_survival(arm, cfs, YEAR, params)),
                    "favourable_function_6m": _r(true_favourable(arm, cfs, params))} for arm in ARMS}
    return {
        "invented": True,
        "about": "Invented demo data for Fulcrum; no real patient is described.",
        "arms": list(ARMS),
        "population": "randomised patients (hospital mix of the randomised, age, sex, lactate, albumin and "
                      "unmeasured fitness averaged over their generating distributions)",
        "survival": {
            "formula": "S(t | arm, cfs, m) = exp(-exp(a_arm + b_arm * (cfs - 5)) * m * t / 365)",
            "log_m": "hospital + age_coef * (age - 80) + male_coef * male + lactate_coef * (log(lactate) - "
                     "log_lactate_mean) + albumin_coef * (albumin - 34) / 5 + fitness_coef * fitness, "
                     "fitness ~ N(0, 1) unmeasured",
            "parameters": params["hazard"],
        },
        "function": {
            "formula": "dead if death by day 182; otherwise P(level <= j | alive) = "
                       "expit(cut_j - slope_arm * (cfs - 5)), levels independent, home_with_help, care_home, "
                       "bedbound",
            "favourable": list(FAVOURABLE),
            "measure": "P(favourable at 6 months) = S(182 | arm, cfs) * expit(cut_2 - slope_arm * (cfs - 5))",
            "parameters": params["function"],
        },
        "break_even": {
            "survival_365": round(survival_break_even(params), 6),
            "favourable_function_6m": round(function_break_even(params), 6),
            "note": "The survival break-even is the same for every covariate pattern (the arms share the "
                    "hazard multiplier m); the function break-even is for the randomised population.",
        },
        "curves": {"cfs": cfs.tolist(), **curves},
        "params": params,
    }


def _r(values: np.ndarray) -> list[float]:
    return [round(float(v), 6) for v in values]


def generate(n: int = N, seed: int = SEED, params: dict = PARAMS) -> tuple[pd.DataFrame, dict]:
    """A seeded invented cohort of n patients and the truth it was drawn from."""
    p, rng = params, np.random.default_rng(seed)
    hosp = p["hospitals"]
    h = rng.choice(len(hosp["names"]), size=n, p=np.asarray(hosp["share"]) / sum(hosp["share"]))
    age = rng.choice(_AGES, size=n, p=age_pmf(p) / age_pmf(p).sum())
    male = rng.random(n) < p["male"]
    cfs = rng.choice(np.arange(1, 10), size=n, p=np.asarray(p["cfs_pmf"]) / sum(p["cfs_pmf"]))
    log_lac = rng.normal(p["log_lactate"]["mean"], p["log_lactate"]["sd"], n)
    albumin = rng.normal(p["albumin"]["mean"], p["albumin"]["sd"], n)
    fitness = rng.normal(0.0, 1.0, n)

    randomised = rng.random(n) < np.asarray(hosp["randomised"])[h]
    coin = rng.random(n) < 0.5
    c = p["choice"]
    choose = expit(c["intercept"] + np.asarray(hosp["surgery_logit"])[h] + c["cfs"] * (cfs - CFS_CENTRE)
                   + c["fitness"] * fitness + c["age"] * (age - AGE_CENTRE))
    lap = np.where(randomised, coin, rng.random(n) < choose)

    hz = p["hazard"]
    log_m = (np.asarray(hosp["log_hazard"])[h] + hz["age"] * (age - AGE_CENTRE) + hz["male"] * male
             + hz["log_lactate"] * (log_lac - p["log_lactate"]["mean"])
             + hz["albumin_per_5"] * (albumin - p["albumin"]["mean"]) / 5 + hz["fitness"] * fitness)
    a = np.where(lap, hz[ARMS[0]]["a"], hz[ARMS[1]]["a"])
    b = np.where(lap, hz[ARMS[0]]["b"], hz[ARMS[1]]["b"])
    yearly = np.exp(a + b * (cfs - CFS_CENTRE) + log_m)
    death = rng.exponential(YEAR / yearly)
    loss = rng.exponential(YEAR / -np.log1p(-p["loss_per_year"]), n)
    end = np.minimum(np.minimum(death, loss), YEAR)
    died = death <= np.minimum(loss, YEAR)
    days = np.maximum(np.ceil(end), 1).astype(int)

    level = _function_levels(rng, lap, cfs, p)
    dead_182 = died & (death <= FUNCTION_DAY)
    known_182 = dead_182 | (loss > FUNCTION_DAY)
    level = np.where(dead_182, "dead", np.where(known_182, level, ""))

    home = _days_home(rng, lap, cfs, death, level, p)
    home_known = (died & (death <= HOME_WINDOW)) | (loss > HOME_WINDOW)
    u = p["utility"]
    utility = np.clip(_lookup(level, u["mean"], np.nan) + rng.normal(0, u["sd"], n),
                      *u["range"])
    answered = rng.random(n) >= u["nonresponse"]
    utility = np.where(answered & ~np.isin(level, ["", "dead"]), np.round(utility, 3) + 0.0, np.nan)

    width = max(5, len(str(n)))
    frame = pd.DataFrame({
        "pid": np.char.add("P", np.char.zfill(np.arange(1, n + 1).astype(str), width)).astype(object),
        "hospital": np.asarray(hosp["names"])[h],
        "allocation": np.where(randomised, "randomised", "chosen"),
        "arm": np.where(lap, ARMS[0], ARMS[1]),
        "age": age,
        "sex": np.where(male, "M", "F"),
        "cfs": cfs,
        "lactate": np.round(np.exp(log_lac), 1),
        "albumin": np.round(albumin).astype(int),
        "days_followed": days,
        "died": died.astype(int),
        "function_6m": pd.Series(np.where(level == "", None, level), dtype=object),
        "qol_6m": utility,
        "days_home_180": pd.Series(home, dtype="Int64").where(home_known, pd.NA),
    })
    return frame, truth(params)


def _function_levels(rng: np.random.Generator, lap: np.ndarray, cfs: np.ndarray, p: dict) -> np.ndarray:
    """Draw each patient's function level had they been alive at day 182 (proportional odds per arm)."""
    probs = np.where(lap[:, None], function_given_alive(ARMS[0], cfs, p), function_given_alive(ARMS[1], cfs, p))
    draw = rng.random(len(cfs))
    idx = (draw[:, None] > np.cumsum(probs, axis=1)[:, :-1]).sum(axis=1)
    return np.asarray(LEVELS[:4])[idx]


def _days_home(rng: np.random.Generator, lap: np.ndarray, cfs: np.ndarray, death: np.ndarray,
               level: np.ndarray, p: dict) -> np.ndarray:
    """Days alive and at home within 180 days: time alive after discharge times a share set by the state."""
    stay = {arm: np.asarray(v) for arm, v in p["stay_days"].items()}
    base, shape, scale, frail = (np.where(lap, stay[ARMS[0]][k], stay[ARMS[1]][k]) for k in range(4))
    los = base + rng.gamma(shape, scale) + frail * np.maximum(cfs - 4, 0)
    mean = _lookup(level, p["home_share"], 0.5)
    share = rng.beta(mean * 20, (1 - mean) * 20)
    alive = np.minimum(death, HOME_WINDOW)
    return np.clip(np.floor(np.maximum(alive - los, 0) * share), 0, HOME_WINDOW).astype(int)


def _lookup(level: np.ndarray, table: dict[str, float], default: float) -> np.ndarray:
    """Per-patient value of a per-level table."""
    return pd.Series(level).map(table).fillna(default).to_numpy(float)


_FORMATS = {"lactate": "{:.1f}", "qol_6m": "{:.3f}"}


def to_csv_bytes(frame: pd.DataFrame) -> bytes:
    """The demo frame as CSV with fixed number formats, so the same frame always gives the same bytes."""
    out = {}
    for col in frame.columns:
        s = frame[col]
        if col in _FORMATS:
            text = s.map(_FORMATS[col].format, na_action="ignore")
        elif pd.api.types.is_numeric_dtype(s):
            text = s.astype("Int64").astype(str)
        else:
            text = s.astype(object)
        out[col] = text.where(s.notna(), "")
    return pd.DataFrame(out).to_csv(index=False, lineterminator="\n").encode("utf-8")


def write_demo(directory: str | Path, n: int = N, seed: int = SEED) -> Path:
    """Write the demo cohort, its spec, dictionary and truth into directory; returns the spec path."""
    directory = make_folder(directory)
    frame, true = generate(n, seed)
    write_atomic(directory / "demo_cohort.csv", to_csv_bytes(frame))
    write_atomic(directory / "truth.json", json.dumps(true, indent=2) + "\n")
    write_atomic(directory / "DICTIONARY.md", dictionary(true, n, seed))
    write_atomic(directory / "local_patients.csv", to_csv_bytes(local_patients(LOCAL_N, seed + 1)))
    spec = directory / "demo.toml"
    write_atomic(spec, SPEC_TOML.format(seed=seed, n=n) + TARGET_TOML)
    return spec


def local_patients(n: int = LOCAL_N, seed: int = SEED + 1, params: dict = PARAMS) -> pd.DataFrame:
    """An invented hospital's own patients, without outcomes: older and frailer than the cohort, a few older than
    anyone in it (so the overlap check has something to say)."""
    p, rng = params, np.random.default_rng(seed)
    age = rng.choice(_AGES, size=n, p=age_pmf(p) / age_pmf(p).sum()) + 3
    cfs_pmf = np.asarray(p["cfs_pmf"]) * np.linspace(0.6, 1.6, 9)
    cfs = rng.choice(np.arange(1, 10), size=n, p=cfs_pmf / cfs_pmf.sum())
    width = max(5, len(str(n)))
    return pd.DataFrame({
        "pid": np.char.add("L", np.char.zfill(np.arange(1, n + 1).astype(str), width)).astype(object),
        "age": age,
        "sex": np.where(rng.random(n) < p["male"], "M", "F"),
        "cfs": cfs,
        "lactate": np.round(np.exp(rng.normal(p["log_lactate"]["mean"], p["log_lactate"]["sd"], n)), 1),
        "albumin": np.round(rng.normal(p["albumin"]["mean"], p["albumin"]["sd"], n)).astype(int),
    })


SPEC_TOML = """\
# Fulcrum demo spec. THE DATA ARE INVENTED: demo_cohort.csv was generated by explorer/demo.py
# (n = {n}, seed = {seed}) and describes no real patient. DICTIONARY.md lists the columns and the
# true curves and break-even points the data were drawn from.

[cohort]
path = "demo_cohort.csv"
id = "pid"
arm = "arm"
arms = ["laparotomy", "non-operative"]
allocation = "allocation"
randomised = "randomised"
# cluster = "hospital" would give cluster-robust intervals, but six hospitals are too few clusters for them
covariates = ["age", "sex", "cfs", "lactate", "albumin"]
labels = {{ age = "Age (years)", sex = "Sex", cfs = "Clinical Frailty Scale", lactate = "Lactate (mmol/L)", albumin = "Albumin (g/L)" }}

[[outcomes]]
name = "alive"
kind = "survival"
time = "days_followed"
event = "died"
horizon = 365
measure = "survival"
label = "Alive at one year"
units = "days"

[[outcomes]]
name = "alive_6m"
kind = "survival"
time = "days_followed"
event = "died"
horizon = 182
measure = "survival"
label = "Alive at six months"
units = "days"

[[outcomes]]
name = "function"
kind = "ordinal"
column = "function_6m"
levels = ["independent", "home_with_help", "care_home", "bedbound", "dead"]
favourable = ["independent", "home_with_help"]
label = "Living at home at six months"

[[outcomes]]
name = "qol"
kind = "continuous"
column = "qol_6m"
among_survivors = true
label = "Quality of life at six months (utility, survivors)"

[[outcomes]]
name = "days_home"
kind = "continuous"
column = "days_home_180"
bounds = [0, 180]
label = "Days alive and at home within 180 days"
units = "days"

[[indices]]
name = "cfs"
column = "cfs"
discrete = true
bounds = [1, 9]
label = "Clinical Frailty Scale"

[[indices]]
name = "age"
column = "age"
label = "Age"
units = "years"
bounds = [18, 110]

[[indices]]
name = "physiology"
formula = "lactate - albumin / 10"
label = "Physiology (lactate minus albumin / 10)"

[[indices]]
name = "risk"
prognostic = {{ outcome = "alive", covariates = ["age", "sex", "cfs", "lactate", "albumin"], fit_on = "second", folds = 5 }}
label = "Predicted one-year risk without surgery (cross-fitted, log hazard)"

[values]
outcome = "function"
weights = {{ independent = 1.0, home_with_help = 0.8, care_home = 0.45, bedbound = 0.1, dead = 0.0 }}
survival_outcome = "alive_6m"
utility_outcome = "qol"
whose = "team"

[analysis]
interval = "analytic"
seed = 1
replicates = 200

[selection]
covariates = ["age", "sex", "cfs", "lactate", "albumin"]

[pairwise]
priority = ["alive", "function", "qol"]
window = 400

[[maps]]
indices = ["cfs", "physiology"]
target = "composite"

# Rule consequences: "laparotomy below a threshold, else non-operative care" (and the reverse) per 100 patients
[policy]
indices = ["cfs", "age"]
tolerance = 1.0

# Where more evidence would change the answer: value of information along each index
[evidence]
threshold = 1.0
"""
# written beside local_patients.csv only (SPEC_TOML alone also serves other cohorts, which have no such file)
TARGET_TOML = """
# The rules are applied to the invented hospital's own patients in local_patients.csv (index and covariate
# columns, no outcomes).
[target]
path = "local_patients.csv"
label = "our own patients (invented)"
"""


def dictionary(true: dict, n: int = N, seed: int = SEED) -> str:
    """The data dictionary (Markdown): columns, generating model, true curves and break-even points."""
    p = true["params"]
    hz, fn, be, hosp = p["hazard"], p["function"], true["break_even"], p["hospitals"]
    rows = "\n".join(
        f"| {c} | " + " | ".join(f"{true['curves'][arm][m][i]:.3f}" for m in ("survival_365", "favourable_function_6m")
                                 for arm in ARMS) + " |"
        for i, c in enumerate(true["curves"]["cfs"]))
    arm_lines = "\n".join(
        f"| {arm} | {hz[arm]['a']:+.2f} | {hz[arm]['b']:.2f} | "
        f"{', '.join(f'{x:+.2f}' for x in fn[arm]['cuts'])} | {fn[arm]['slope']:.2f} |" for arm in ARMS)
    return f"""# Demo cohort: data dictionary

**These data are invented.** `demo_cohort.csv` was generated by `explorer/demo.py` (n = {n}, seed = {seed};
`python demo_data/generate.py` rewrites the same bytes). No real patient, hospital or study is described.
The scenario: older adults (65-95) admitted with an acute abdominal emergency, treated by emergency
laparotomy or by non-operative care, in six hospitals. About one patient in eight was randomised; the
others were treated as the clinician and patient chose.

## Columns

| column | meaning |
|---|---|
| pid | patient identifier (unique) |
| hospital | hospital H1-H6 (six are too few to serve as clusters for robust intervals, so the spec does not name a cluster column) |
| allocation | `randomised` or `chosen` |
| arm | `laparotomy` or `non-operative` |
| age | years, 65-95 |
| sex | `F` or `M` |
| cfs | Clinical Frailty Scale, whole levels 1 (very fit) to 9 (terminally ill) |
| lactate | serum lactate on admission, mmol/L (one decimal) |
| albumin | serum albumin on admission, g/L (whole numbers) |
| days_followed | days from admission to death, loss to follow-up or day 365 (1-365) |
| died | 1 = died by the end of follow-up, 0 = alive when follow-up ended (censored) |
| function_6m | at six months (day 182): independent, home_with_help, care_home, bedbound, or dead (died by day 182); empty when lost to follow-up before day 182 |
| qol_6m | health utility at six months (EQ-5D-like, 1 = full health, below 0 = worse than death); empty for the dead, those lost to follow-up and about 8% of survivors who did not answer |
| days_home_180 | days alive and at home within the first 180 days (0-180); empty when lost to follow-up before day 180 |

## How the data were generated

Survival is exponential within each arm. With `m` a hazard multiplier shared by both arms,

    S(t | arm, cfs, m) = exp(-exp(a_arm + b_arm * (cfs - 5)) * m * t / 365)
    log m = hospital {_s(hz['age'])} * (age - 80) {_s(hz['male'])} * male {_s(hz['log_lactate'])} * (log lactate - {p['log_lactate']['mean']})
            {_s(hz['albumin_per_5'])} * (albumin - 34) / 5 {_s(hz['fitness'])} * fitness

`fitness ~ N(0, 1)` is unmeasured (not in the file). Follow-up ends at day 365; about
{p['loss_per_year']:.0%} a year are lost to follow-up, at random.

Population (generated independently of each other, so the truth below is exact):

- hospitals {', '.join(hosp['names'])}: shares {hosp['share']}, share randomised {hosp['randomised']},
  log-hazard offsets {hosp['log_hazard']}, surgery log-odds offsets for chosen patients {hosp['surgery_logit']};
- age: {p['age']['rule']}; sex: male with probability {p['male']};
- CFS 1-9 with probabilities {p['cfs_pmf']};
- log lactate ~ N({p['log_lactate']['mean']}, {p['log_lactate']['sd']}^2) and albumin ~ N({p['albumin']['mean']:g}, {p['albumin']['sd']:g}^2),
  recorded rounded (the outcomes were drawn from the unrounded values).

Function among those alive at day 182 follows a proportional-odds model per arm:

    P(level <= j | alive at 182, arm, cfs) = expit(cut_j - slope_arm * (cfs - 5))

over the levels independent, home_with_help, care_home, bedbound; those who died by day 182 are `dead`.

| arm | a | b | cuts | slope |
|---|---|---|---|---|
{arm_lines}

Laparotomy lowers the hazard of death for fit patients (its hazard rises faster with frailty), but its
frail survivors are more often bedbound or in a care home. Randomised patients were allocated 1:1. For
chosen patients, the chance of laparotomy is expit({p['choice']['intercept']} + hospital {_s(p['choice']['cfs'])} * (cfs - 5)
{_s(p['choice']['fitness'])} * fitness {_s(p['choice']['age'])} * (age - 80)): clinicians operate more on fitter patients, and
because unmeasured fitness also lowers the hazard, chosen patients who had laparotomy do better than
randomised ones at the same CFS (a selection effect), while chosen non-operative patients do worse.

## True curves for randomised patients

Averaged over the randomised patients' hospitals, age, sex, lactate, albumin and fitness (exact sums and
Gauss-Hermite quadrature of the formulas above). The same numbers, with every parameter, are in `truth.json`.

| CFS | alive at one year, laparotomy | alive at one year, non-operative | favourable function at 6 months, laparotomy | favourable function at 6 months, non-operative |
|---|---|---|---|---|
{rows}

Favourable function = independent or home_with_help at six months (death counts as unfavourable).

## True break-even points (randomised patients)

- One-year survival: CFS = **{be['survival_365']:.3f}** (closed form: 5 + (a_non-operative - a_laparotomy) / (b_laparotomy - b_non-operative); the same for every covariate pattern). Laparotomy gives the better survival below it.
- Favourable function at six months: CFS = **{be['favourable_function_6m']:.3f}** (root of the difference of the curves above). Laparotomy gives the better chance of favourable function below it.

Between the two points, laparotomy buys survival at the cost of more dependent survivors: the outcomes
break even at different frailty levels.

## Local patients (local_patients.csv)

{LOCAL_N} invented patients of "our own hospital", for the rules per 100 patients (`[target]`): pid, age, sex, cfs,
lactate and albumin drawn as above except that ages are three years higher (68-98, so a few are older than anyone
in the cohort) and the frailty scale is tilted towards frailer levels (each level's share times 0.6 at CFS 1
rising evenly to 1.6 at CFS 9). No outcomes, no arm: the rules say what would happen to them.
"""


def _s(x: float) -> str:
    """A signed term for a formula: '+ 0.9', '- 0.35'."""
    return f"{'-' if x < 0 else '+'} {abs(x):g}"
