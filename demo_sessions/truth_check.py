"""How well each simulated coder matches the generator's truth: a demo-quality check.

This is NOT the agreement step (agreement/ compares coders with each other and knows
nothing of a truth).  It answers "did the generator plant coders of the accuracy it
meant to?" with scikit-learn's ``cohen_kappa_score`` between each coder's codes and the
true state behind each window (DIR/truth_windows.parquet).  Windows coded as could not
be observed, or not coded, are left out.
"""
from __future__ import annotations

import pandas as pd
from sklearn.metrics import cohen_kappa_score

from observer_app.study.scheme import Scheme


def coder_vs_truth(observations: pd.DataFrame, truth: pd.DataFrame, scheme: Scheme) -> dict[str, dict[str, dict]]:
    """{dimension: {coder: {"kappa", "percent_correct", "windows"}}}.

    ``observations``: the study store's OBSERVATIONS table; ``truth``: truth_windows
    (observation_id and one true-state column per dimension).
    """
    joined = observations.merge(truth, on="observation_id", suffixes=("", "_true"))
    result: dict[str, dict[str, dict]] = {}
    for dimension in scheme.dimensions:
        coded, true = joined[dimension.name], joined[f"{dimension.name}_true"]
        usable = coded.notna() & coded.ne(dimension.could_not_observe) & true.notna()
        per_coder = {}
        for coder, rows in joined[usable].groupby("coder", sort=True):
            codes = rows[dimension.name].astype(str)
            truths = rows[f"{dimension.name}_true"].astype(str)
            per_coder[str(coder)] = {
                "kappa": round(float(cohen_kappa_score(codes, truths)), 4),
                "percent_correct": round(float((codes == truths).mean()), 4),
                "windows": int(len(rows)),
            }
        result[dimension.name] = per_coder
    return result
