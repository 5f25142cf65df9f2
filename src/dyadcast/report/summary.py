"""Plain-language findings derived from the accuracy views: which model to trust at which horizon and
whether its intervals are honest. Shared by the HTML report and the Prefect artifacts.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

REFERENCE = "persistence"
# Common practice, no source: below about 30 common targets a difference in WIS says little.
MIN_COMMON = 30
# Common practice, no source: coverage within 5 points of nominal reads as "about right".
COVERAGE_TOLERANCE = 0.05

CAUTION_TITLE = "A planning aid, not a prediction about people"
CAUTION_TEXT = (
    "These figures estimate how many people may arrive, to help plan reception and services under deep "
    "uncertainty. They say nothing about any individual and must never be used to decide a person's case "
    "or to restrict anyone's movement. Read the range, not only the middle number: the real figure will "
    "often differ from the median, and sometimes fall outside the range."
)


def pick_vintage(frame: pd.DataFrame, level: str = "dyad") -> pd.DataFrame:
    """Rows of one level, against the latest revision when scored (else the first release)."""
    if frame.empty:
        return frame
    out = frame[frame["level"] == level] if "level" in frame.columns else frame
    if "vintage" in out.columns and not out.empty:
        vintage = "latest" if (out["vintage"] == "latest").any() else out["vintage"].iloc[0]
        out = out[out["vintage"] == vintage]
    return out.reset_index(drop=True)


def pooled(overview: pd.DataFrame, by: tuple[str, ...] = ("model", "horizon")) -> pd.DataFrame:
    """Pool accuracy_overview over cutoffs, weighting each cutoff by its number of scored forecasts."""
    rows = pick_vintage(overview)
    if rows.empty:
        return pd.DataFrame(columns=[*by, "n", "mae", "rmse", "mean_wis", "bias", "coverage_50", "coverage_90"])
    weighted = ["mae", "mse", "mean_wis", "bias", "coverage_50", "coverage_90"]
    work = rows.assign(mse=rows["rmse"].astype(float) ** 2)[[*by, "n", *weighted]].copy()
    for column in weighted:
        work[column] = work[column].astype(float) * work["n"]
    out = work.groupby(list(by), as_index=False).sum(numeric_only=True)
    for column in weighted:
        out[column] = out[column] / out["n"]
    out["rmse"] = out.pop("mse") ** 0.5
    return out


@dataclass(frozen=True)
class Choice:
    horizon: int
    model: str | None  # None: too little evidence
    relative_wis: float | None
    n_common: int


def choices(skill: pd.DataFrame, min_common: int = MIN_COMMON) -> list[Choice]:
    """Per horizon, the model with the lowest relative WIS if it beats persistence, else persistence."""
    rows = pick_vintage(skill)
    out = []
    if rows.empty:
        return out
    for horizon, part in rows.groupby("horizon", sort=True):
        part = part[(part["model"] != REFERENCE) & part["relative_wis"].notna()]
        enough = part[part["n_common"] >= min_common]
        if enough.empty:
            out.append(Choice(int(horizon), None, None, int(part["n_common"].max()) if len(part) else 0))
            continue
        best = enough.sort_values(["relative_wis", "model"]).iloc[0]
        if best["relative_wis"] < 1:
            out.append(Choice(int(horizon), str(best["model"]), float(best["relative_wis"]), int(best["n_common"])))
        else:
            out.append(Choice(int(horizon), REFERENCE, 1.0, int(best["n_common"])))
    return out


def _span(horizons: list[int]) -> str:
    first, last = horizons[0], horizons[-1]
    if first == last:
        return f"{first} month ahead" if first == 1 else f"{first} months ahead"
    return f"{first}–{last} months ahead"


def _consecutive(items: list[Choice]) -> list[list[Choice]]:
    """Runs of adjacent horizons with the same choice, so the sentence says "1–3 months" once."""
    groups: list[list[Choice]] = []
    for choice in items:
        if groups and groups[-1][-1].model == choice.model and groups[-1][-1].horizon == choice.horizon - 1:
            groups[-1].append(choice)
        else:
            groups.append([choice])
    return groups


def trust_sentence(skill: pd.DataFrame, min_common: int = MIN_COMMON) -> str:
    """One sentence for the manager, derived from skill_vs_persistence."""
    picked = choices(skill, min_common)
    if not picked:
        return ("No forecast has been scored yet, so there is no evidence yet of which model to trust; "
                "until then, read the intervals rather than the point values.")
    parts, unjudged = [], []
    for group in _consecutive(picked):
        horizons = [c.horizon for c in group]
        model = group[0].model
        if model is None:
            unjudged.extend(horizons)
        elif model == REFERENCE:
            parts.append(f"persistence (last month's figure) for {_span(horizons)}, where no model beat it")
        else:
            gains = sorted(round(100 * (1 - c.relative_wis)) for c in group)
            gain = f"{gains[0]} %" if gains[0] == gains[-1] else f"{gains[0]}–{gains[-1]} %"
            parts.append(f"{model} for {_span(horizons)} (its interval score is {gain} lower than persistence's)")
    if not parts:
        return (f"Too few forecasts have been scored yet (fewer than {min_common} per horizon) to say which model "
                "to trust; until then, read the intervals rather than the point values.")
    sentence = "Trust " + "; ".join(parts)
    if unjudged:
        sentence += f"; too few forecasts have been scored yet to judge {_span(sorted(unjudged))}"
    return sentence + "."


def coverage_sentence(pooled_rows: pd.DataFrame, model: str) -> str:
    """Are the model's intervals honest? Pooled over horizons and cutoffs."""
    rows = pooled_rows[pooled_rows["model"] == model] if not pooled_rows.empty else pooled_rows
    if rows.empty or rows["n"].sum() == 0:
        return f"No forecast of {model} has been scored yet, so the honesty of its intervals is not known yet."
    n = rows["n"].sum()
    cov90 = float((rows["coverage_90"] * rows["n"]).sum() / n)
    cov50 = float((rows["coverage_50"] * rows["n"]).sum() / n)
    if abs(cov90 - 0.9) <= COVERAGE_TOLERANCE:
        verdict = "about right"
    elif cov90 < 0.9:
        verdict = "too narrow, so expect more surprises than the ranges suggest"
    else:
        verdict = "wider than needed, so the real uncertainty is smaller than shown"
    return (f"The 90 % ranges of {model} contained the reported figure in {100 * cov90:.0f} % of {int(n):,} "
            f"scored forecasts ({verdict}); the 50 % ranges in {100 * cov50:.0f} %.")
