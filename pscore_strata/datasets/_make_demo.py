"""Generate the invented critical-care registry and its data card.

Run ``python -m pscore_strata.datasets._make_demo`` to rewrite
``data/critical_care_demo.csv`` and ``data/critical_care_demo.md`` from the fixed seed.

The registry is built stratum first, so the truth is known. Survival is logistic in the
covariates under each strategy, with a positive logit-scale gain under the protective one, so
monotonicity holds for every patient and the default (arm-wise logistic) survival model is
correctly specified. Patients who would survive
only with protective ventilation (the protected stratum) are sicker than always-survivors:
their share rises with the severity score, and the functional score falls with it. The
treated survivors therefore include extra sick patients, which pulls the naive
survivor-only contrast below the true SACE even though treatment helps every
always-survivor by the same amount.
"""

from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import expit

from ._demo import DEMO_CARD, DEMO_FILE, DEMO_TRUE_EFFECT

DEMO_SEED = 60_613
DEMO_N_PATIENTS = 2000
SITES = ("North", "Harbour", "Valley", "Riverside", "Summit")
_SITE_SHARES = (0.25, 0.20, 0.20, 0.20, 0.15)
# Sites differ in how often they use the protective strategy (practice variation).
_SITE_TREATMENT_OFFSET = {"North": 0.4, "Harbour": -0.3, "Valley": 0.0,
                          "Riverside": 0.2, "Summit": -0.5}
# Logit-scale gain in survival from the protective strategy: larger for sicker patients, so
# the protected stratum is sicker than the always-survivors.
_LIFT_INTERCEPT, _LIFT_SEVERITY = 0.9, 0.2


def _draw_registry(n_patients, rng):
    """Covariates, latent strata, treatment and potential outcomes of invented patients."""
    age = np.rint(np.clip(rng.normal(61.0, 13.0, n_patients), 18, 90)).astype(int)
    female = (rng.random(n_patients) < 0.41).astype(int)
    severity = np.rint(np.clip(rng.normal(18.0, 6.0, n_patients), 2, 38)).astype(int)
    comorbidities = np.minimum(rng.poisson(1.2, n_patients), 8)
    pf_ratio = np.rint(np.clip(np.exp(rng.normal(np.log(170.0), 0.35, n_patients)), 50, 450))
    pf_ratio = pf_ratio.astype(int)
    site = rng.choice(np.asarray(SITES, dtype=object), size=n_patients, p=_SITE_SHARES)

    severity_z = (severity - 18.0) / 6.0
    age_z = (age - 61.0) / 13.0
    pf_z = (np.log(pf_ratio) - np.log(170.0)) / 0.35
    burden = comorbidities - 1.2

    # Survival is logistic in the covariates under each strategy, and the protective strategy
    # adds a positive amount on the logit scale everywhere (at least 0.35 over the clipped
    # severity range), so S(1) >= S(0) for every patient and an arm-wise logistic survival
    # model is correctly specified: its fitted arms do not cross beyond estimation noise.
    control_logit = 0.3 - 0.7 * severity_z - 0.4 * age_z - 0.2 * burden + 0.3 * pf_z
    always = expit(control_logit)
    protected = expit(control_logit + _LIFT_INTERCEPT + _LIFT_SEVERITY * severity_z) - always
    draw = rng.random(n_patients)
    stratum = np.where(draw < always, "always_survivor",
                       np.where(draw < always + protected, "protected", "doomed"))
    alive_if_treated = (stratum != "doomed").astype(int)
    alive_if_control = (stratum == "always_survivor").astype(int)

    offset = np.array([_SITE_TREATMENT_OFFSET[name] for name in site])
    propensity = expit(-0.1 + 0.5 * severity_z - 0.3 * age_z + offset)
    treated = (rng.random(n_patients) < propensity).astype(int)

    # Principal ignorability given the covariates: the score's mean depends on X only, and
    # the treatment adds the same constant for every patient who survives under it.
    control_mean = (56.0 - 5.0 * severity_z - 2.5 * age_z - 1.5 * burden + 1.5 * pf_z
                    + 1.0 * female)
    person = rng.normal(0.0, 5.0, n_patients)
    score_control = control_mean + person + rng.normal(0.0, 2.5, n_patients)
    score_treated = (control_mean + DEMO_TRUE_EFFECT + person
                     + rng.normal(0.0, 2.5, n_patients))
    return dict(
        age=age, female=female, severity=severity, comorbidities=comorbidities,
        pf_ratio=pf_ratio, site=site, stratum=stratum, treated=treated,
        alive_if_treated=alive_if_treated, alive_if_control=alive_if_control,
        score_treated=score_treated, score_control=score_control, propensity=propensity,
    )


def _build(random_state=DEMO_SEED, n_patients=DEMO_N_PATIENTS):
    """Return the registry frame and the latent quantities the card reports."""
    rng = np.random.default_rng(random_state)
    latent = _draw_registry(n_patients, rng)
    treated = latent["treated"] == 1
    alive = np.where(treated, latent["alive_if_treated"], latent["alive_if_control"])
    score = np.where(treated, latent["score_treated"], latent["score_control"])
    exists = np.concatenate([latent["score_treated"][latent["alive_if_treated"] == 1],
                             latent["score_control"][latent["alive_if_control"] == 1]])
    if exists.min() < 0 or exists.max() > 100:
        # Clipping would bend the constant effect, so the scale must leave room instead.
        raise RuntimeError("a functional score fell outside 0-100; adjust the generator")
    score = np.where(alive == 1, np.round(score, 1), np.nan)
    frame = pd.DataFrame({
        "patient_id": [f"R{i:05d}" for i in range(1, n_patients + 1)],
        "age": latent["age"],
        "female": latent["female"],
        "severity_score": latent["severity"],
        "comorbidities": latent["comorbidities"],
        "pf_ratio": latent["pf_ratio"],
        "site": pd.Series(latent["site"].astype(str)),
        "protective_ventilation": latent["treated"],
        "alive_6mo": alive.astype(int),
        "functional_score_6mo": score,
    })
    return frame, latent


def generate_demo(random_state=DEMO_SEED, n_patients=DEMO_N_PATIENTS):
    """Generate the demo registry in memory; the defaults reproduce the shipped CSV.

    Parameters
    ----------
    random_state : int, default=DEMO_SEED
        Seed of :func:`numpy.random.default_rng`.
    n_patients : int, default=2000
        Number of invented patients.

    Returns
    -------
    frame : pandas.DataFrame
        The same columns and values as :func:`load_demo` returns.
    """
    return _build(random_state, n_patients)[0]


def _outside_share(n_draws=1_000_000):
    """Share of existing potential scores outside 0-100 in a large draw (clipping check)."""
    latent = _draw_registry(n_draws, np.random.default_rng(DEMO_SEED + 1))
    scores = np.concatenate([latent["score_treated"][latent["alive_if_treated"] == 1],
                             latent["score_control"][latent["alive_if_control"] == 1]])
    return float(np.mean((scores < 0) | (scores > 100)))


def _crossings(frame):
    """Rows where the default survival models contradict monotonicity (as the report counts)."""
    from ..estimators import MultiplyRobust
    from ._demo import DEMO_ROLES

    X = pd.get_dummies(frame[DEMO_ROLES["covariates"]], columns=DEMO_ROLES["categorical"],
                       drop_first=True, dtype=float)
    fitted = MultiplyRobust().fit(X, frame[DEMO_ROLES["outcome"]],
                                  treatment=frame[DEMO_ROLES["treatment"]],
                                  survival=frame[DEMO_ROLES["survival"]])
    return int(fitted.n_monotonicity_violations_)


def card_text(frame, latent):
    """Text of the data card, with the numbers of the generated sample."""
    alive = frame["alive_6mo"] == 1
    treated = frame["protective_ventilation"] == 1
    outcome = frame["functional_score_6mo"]
    naive = outcome[alive & treated].mean() - outcome[alive & ~treated].mean()
    is_always = latent["stratum"] == "always_survivor"
    sample_sace = np.mean(latent["score_treated"][is_always] - latent["score_control"][is_always])
    shares = pd.Series(latent["stratum"]).value_counts(normalize=True)
    survival = frame.groupby("protective_ventilation")["alive_6mo"].mean()
    mean_severity = pd.Series(latent["severity"]).groupby(latent["stratum"]).mean()
    return f"""# Critical-care demo registry (invented data)

**These data are invented.** They were simulated by a program; no row describes a real
patient, hospital or study. Use them to learn and test the library, never to draw
clinical conclusions.

An invented registry of {len(frame)} ventilated patients compares a lung-protective,
low-tidal-volume ventilation strategy with a conventional one. Survival to six months
truncates the outcome: the functional score exists only for patients alive at six months.

## Columns

| column | meaning | units / values |
| --- | --- | --- |
| `patient_id` | row identifier | text, `R00001`... |
| `age` | age at admission | years, 18-90 |
| `female` | sex recorded as female | 0/1 |
| `severity_score` | invented acute-severity score at admission (higher is sicker) | points, 2-38 |
| `comorbidities` | number of chronic conditions | count |
| `pf_ratio` | baseline PaO2/FiO2 ratio | mmHg |
| `site` | invented hospital | {", ".join(SITES)} |
| `protective_ventilation` | treatment: 1 = lung-protective strategy, 0 = conventional | 0/1 |
| `alive_6mo` | alive six months after admission | 0/1 |
| `functional_score_6mo` | six-month functional score (higher is better) | 0-100; blank if died |

## How it was generated

`python -m pscore_strata.datasets._make_demo` (module `pscore_strata/datasets/_make_demo.py`),
seed {DEMO_SEED}. Each patient's principal stratum is drawn first from covariate-dependent
probabilities: always-survivor, protected (alive only with the protective strategy) or
doomed. Six-month survival is logistic in the covariates under each strategy, and the
protective strategy raises its logit by {_LIFT_INTERCEPT} + {_LIFT_SEVERITY} x (standardized
severity), which is positive for every patient: no patient is harmed, so monotonicity holds,
and the default arm-wise logistic survival model is correctly specified (in this sample its
two fitted arms cross in {_crossings(frame)} of {len(frame)} rows, each by less than 0.05).
Treatment is assigned by a logistic model in severity, age and site. The functional score's
mean depends only on the covariates and rises by exactly {DEMO_TRUE_EFFECT} points under the
protective strategy, so principal ignorability holds given the covariates.

Protected patients are sicker (mean severity score
{mean_severity.get("protected", np.nan):.1f} against \
{mean_severity.get("always_survivor", np.nan):.1f} for always-survivors), and sicker
patients score lower. The treated survivors therefore include extra low scorers,
which pushes the survivor-only comparison below the true effect.

No score needed clipping: every potential score of the sample lies in 0-100, and in a
separate draw of 1,000,000 patients the share of potential scores (of the arms in which
the patient survives) outside 0-100 was
{_outside_share():.2g}. Scores are rounded to one decimal.

## Truth

True SACE: {DEMO_TRUE_EFFECT} points

It is exact, not estimated: every always-survivor's mean score rises by the same constant
{DEMO_TRUE_EFFECT}, so the average over any population of always-survivors is
{DEMO_TRUE_EFFECT}. Rounding to one decimal changes it by far less than 0.001.

## This sample

| quantity | value |
| --- | --- |
| always-survivor share | {shares.get("always_survivor", 0.0):.3f} |
| protected share | {shares.get("protected", 0.0):.3f} |
| doomed share | {shares.get("doomed", 0.0):.3f} |
| six-month survival, protective / conventional | {survival.get(1):.3f} / {survival.get(0):.3f} |
| naive survivor-only difference in mean score | {naive:.2f} |
| mean Y(1) - Y(0) among this sample's always-survivors | {sample_sace:.2f} |
"""


def main(directory=None):
    """Rewrite the CSV and the data card in ``directory`` (the package data by default)."""
    directory = Path(directory) if directory else Path(__file__).resolve().parent / "data"
    directory.mkdir(parents=True, exist_ok=True)
    frame, latent = _build()
    frame.to_csv(directory / DEMO_FILE, index=False, lineterminator="\n")
    (directory / DEMO_CARD).write_text(card_text(frame, latent), encoding="utf-8")
    return directory


if __name__ == "__main__":
    print(f"wrote {DEMO_FILE} and {DEMO_CARD} to {main()}")
