"""The demo pipeline: build the demo study, then run every fieldmark step on it.

``STEPS`` is the list, in order; each step reads what the earlier ones left in the
``DemoRun``, adds its figures to the summary and one section to the report.  The steps:
generate, align, coder_vs_truth, agree, export, check; a new fieldmark verb adds its step here.
Every figure is computed by the pipeline from the study and the files it writes; only the
"truth" entries (and the "versus_truth" differences) use DIR/truth.json, and say so.

DIR/summary.json (``SUMMARY_KEYS`` are its top-level keys):
    seed            int     the generator's seed
    study           string  the study folder the pipeline ran on (DIR/study)
    generated       object  learners, events, observations, sync_marks: what was generated
    steps           list    {"name", "seconds"} per step, in the order run
    devices         object  per coder device:
                              "truth":     {"offset_s", "drift_ppm", "reference"} -- planted by the
                                           generator, copied from DIR/truth.json (the only copied figures)
                              "recovered": the align step's stored model (`fieldmark align`, default
                                           method: sync marks), stated at the truth's reference time:
                                           {"method", "offset_s", "drift_ppm", "reference_ns",
                                           "marks_used", "median_abs_residual_s", "confidence",
                                           "offset_standard_error_s", "span_standard_error_s",
                                           "outlying_marks", "warnings", "versus_truth"}
                              "recovered_automatic": the same from the automatic scan (no marks)
                              "versus_truth" (in both): {"offset_error_s", "drift_error_ppm"}:
                                           recovered minus planted, at the same reference time
    dimensions      object  per scheme dimension, from the agree step (agreement/, as `fieldmark agree`):
                            "kappa" (Cohen's for two coders), "alpha" (Krippendorff's) and
                            "percent_agreement", each {"value", "low", "high"} (95 % cluster-bootstrap
                            interval over learners), "band" (Landis & Koch) and "units" (paired windows)
    coder_vs_truth  object  demo-quality check, NOT the agreement step: per dimension and coder,
                            {"kappa", "percent_correct", "windows"}: scikit-learn's Cohen's kappa of the
                            simulated coder's codes against the generator's true states
    windows         object  from the export step: {"written", "path"} -- DIR/windows.parquet, labelled,
                            de-identified windows with their features (manifest beside it)
    detector        object  from the check step: per dimension the grouped cross-validated check of
                            export/detector_check.py audited by site and across sites, as one dimension of
                            `fieldmark check --by site --transfer site --json` (CHECK OUTPUT in
                            export/tables.py: rows, learners, folds, codes, model, majority_baseline,
                            stratified_baseline, calibration, by {"site": [group]}, transfer ...)
    seconds         float   wall time of the whole run
DIR/report.html: one section per step, tables and base64 PNG figures, self-contained.
"""
from __future__ import annotations

import json
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
from tqdm import tqdm

from agreement.statistics import assess_agreement, headline_kappa
from agreement.plots import confusion_figure, drift_figure
from agreement.tables import FIGURE_KEYS, FIGURE_LABELS
from agreement.breakdowns import rolling_kappa
from demo_sessions.generate import Generated, check_output_folder, check_seed, generate_demo
from demo_sessions.log_files import SOUTH_VERBS
from demo_sessions.truth_check import coder_vs_truth
from export.features import FeatureSettings
from export.labelled_windows import ExportSettings
from demo_sessions.truth_files import read_truth
from export.audit_report import figure_html, group_bars, transfer_heatmap
from export.detector_check import CheckSettings, check_windows
from demo_sessions import report
from observer_app.pipeline.alignment import (align_study, clock_reference_ns, fit_clock_models, model_summary,
                                            read_study_logs, reference_text)
from observer_app.pipeline.units import study_units
from observer_app.study.store import Store
from observer_app.pipeline.study_export import export_study
from observer_app.study.folder import Study, load_study
from observer_app.study.output_paths import publish_text
from sync.clock import ClockModel
from sync.residual_plot import residual_figure
from sync.windows import observations_on_log_clock

SUMMARY_FILE = "summary.json"
WINDOWS_FILE = "windows.parquet"
REPORT_FILE = "report.html"
SUMMARY_KEYS: tuple[str, ...] = (
    "seed", "study", "generated", "steps", "devices", "dimensions", "coder_vs_truth", "windows", "detector",
    "seconds",
)
TIMELINE_LEARNERS = 4
SITE = "site"  # the roster attribute naming each apprentice's centre
AGREEMENT_RESAMPLES = 1000


@dataclass
class DemoRun:
    """What the steps share: the output folder, the study, the summary and the report so far."""

    out: Path
    seed: int
    size: str
    summary: dict = field(default_factory=dict)
    sections: list[str] = field(default_factory=list)
    generated: Generated | None = None
    study: Study | None = None
    observations: pd.DataFrame | None = None
    clock_models: dict[str, ClockModel] = field(default_factory=dict)  # from the align step, stored in the study


def step_generate(run: DemoRun) -> None:
    """Build the demo study with the generator; record the planted clocks under "truth"."""
    run.generated = generate_demo(run.out, run.seed, run.size)
    run.study = load_study(run.generated.study)
    with Store(run.study.store_path) as store:
        run.observations = store.observations(run.study.scheme.dimension_names)
    header, _, _ = read_truth(run.out)
    run.summary["study"] = str(run.generated.study)
    run.summary["generated"] = {"learners": run.generated.learners, "events": run.generated.events,
                                "observations": run.generated.observations, "sync_marks": run.generated.sync_marks}
    run.summary["devices"] = {device: {"truth": {key: planted[key] for key in ("offset_s", "drift_ppm", "reference")},
                                       "recovered": None, "recovered_automatic": None}
                              for device, planted in header["devices"].items()}
    clocks = pd.DataFrame([{"device": d, "coder": p["coder"], "offset_s": p["offset_s"], "drift_ppm": p["drift_ppm"]}
                           for d, p in header["devices"].items()])
    coded = (run.observations.groupby(["coder", "device", "mode"]).agg(
        windows=("observation_id", "size"), paired=("paired_start", lambda s: int(s.notna().sum())),
        not_coded=("no_code", "sum")).reset_index())
    run.sections.append(report.section(
        "The demo study",
        report.paragraph(f"Generated with seed {run.seed}: {run.generated.learners} apprentices at two training centres, "
                         f"{run.generated.events} simulator events (north as CSV with local times, south as xAPI "
                         f"statements), {run.generated.observations} coded windows and {run.generated.sync_marks} "
                         "sync marks from two coders' laptops, imported into the study's store."),
        report.table_html(coded),
        report.paragraph("Truth planted by the generator (not computed by the pipeline): each laptop's clock.",
                         "note truth"),
        report.table_html(clocks, "truth"),
    ))


def step_coder_vs_truth(run: DemoRun) -> None:
    """Demo-quality check: each simulated coder against the generator's truth (scikit-learn kappa)."""
    assert run.study is not None and run.observations is not None
    _, states, truth = read_truth(run.out)
    figures = coder_vs_truth(run.observations, truth, run.study.scheme)
    run.summary["coder_vs_truth"] = figures
    rows = pd.DataFrame([{"dimension": dimension, "coder": coder, **values}
                         for dimension, coders in figures.items() for coder, values in coders.items()])
    paired = run.observations[run.observations["paired_start"].notna()]
    shown = sorted(paired["learner"].unique())[:TIMELINE_LEARNERS]
    activity = run.study.scheme.dimensions[0]
    codes = run.observations[run.observations["learner"].isin(shown) & run.observations[activity.name].notna()]
    middle = codes["window_start"] + (codes["window_end"] - codes["window_start"]) / 2
    clock = "each laptop's own clock"
    if run.clock_models:
        on_log = observations_on_log_clock(codes, run.clock_models)
        middle = pd.Series(pd.to_datetime((on_log["log_start_ns"] + on_log["log_end_ns"]) // 2, unit="ns", utc=True),
                           index=codes.index)
        clock = "the log's clock, through the aligned clock models"
    codes = pd.DataFrame({"learner": codes["learner"], "coder": codes["coder"], "code": codes[activity.name],
                          "time": middle})
    origin = codes["time"].min()
    day = states[(states["dimension"] == activity.name) & states["learner"].isin(shown)
                 & (states["start"] < origin + pd.Timedelta(hours=2)) & (states["end"] > origin - pd.Timedelta(minutes=5))]
    run.sections.append(report.section(
        "Simulated coders against the truth (demo check, not the agreement step)",
        report.paragraph("Cohen's kappa (scikit-learn) of each coder's codes against the true state behind each "
                         "window; could-not-observe and uncoded windows left out."),
        report.table_html(rows),
        report.figure_html(report.timeline_figure(
            day, codes, activity, origin,
            f"True {activity.name} (bands, truth) and coded {activity.name} (markers: circles first coder, triangles "
            f"second) at the window middle on {clock}"), "latent-state timeline"),
        *(report.figure_html(report.codes_per_learner_figure(run.observations, dimension), f"{dimension.name} per learner")
          for dimension in run.study.scheme.dimensions),
    ))


def versus_truth(model: ClockModel, truth: dict) -> dict:
    """Recovered minus planted; ``model`` already stated at the truth's reference time."""
    return {"offset_error_s": round(model.offset_s - truth["offset_s"], 3),
            "drift_error_ppm": round(model.drift_ppm - truth["drift_ppm"], 2)}


def step_align(run: DemoRun) -> None:
    """The align step: each laptop's clock model, stored in the study (sync marks when there are enough).

    The automatic scan (no marks) runs first, for comparison only; the default method runs
    last, so its models are the stored ones every later step uses.
    """
    assert run.study is not None
    logs = read_study_logs(run.study)  # read once, used by both fits
    automatic = fit_clock_models(run.study, "auto", logs=logs).models
    alignment = align_study(run.study, "best", logs=logs)
    run.clock_models = alignment.models
    planted = [figures["truth"]["reference"] for figures in run.summary["devices"].values() if figures.get("truth")]
    reference = pd.Timestamp(planted[0]).value if planted else clock_reference_ns(run.study)
    rows = []
    for key, models in (("recovered", alignment.models), ("recovered_automatic", automatic)):
        for device, model in models.items():
            truth = run.summary["devices"].get(device, {}).get("truth")
            entry = run.summary["devices"].setdefault(device, {"truth": None, "recovered": None,
                                                               "recovered_automatic": None})
            # the same fitted line, stated at the one reference instant (the planted one) so the figures compare
            model = model.at_reference(pd.Timestamp(truth["reference"]).value if truth else reference)
            entry[key] = {**model_summary(model), "versus_truth": versus_truth(model, truth) if truth else None}
            rows.append({"device": device, "method": model.method, "offset_s": model.offset_s,
                         "drift_ppm": model.drift_ppm, "marks_used": model.marks_used,
                         "median_abs_residual_s": model.median_abs_residual_s, "confidence": model.confidence,
                         "planted offset_s (truth)": truth and truth["offset_s"],
                         "planted drift_ppm (truth)": truth and truth["drift_ppm"]})
    run.sections.append(report.section(
        "Clocks: each laptop on the log's clock",
        report.paragraph(f"Read {alignment.read_report.rows} log events. Device time = log time + offset + drift x "
                         f"(log time - reference); every offset here and in the plots is stated at "
                         f"{reference_text(reference)} (the generator's reference time). The "
                         "automatic scan (method auto) is shown for comparison; the stored model (marks) is what "
                         "every later step uses. The planted columns are the generator's truth, shown for "
                         "comparison only."),
        report.table_html(pd.DataFrame(rows)),
        *(report.figure_html(residual_figure(model.at_reference(reference)), f"clock fit of {device}")
          for models in (alignment.models, automatic) for device, model in models.items()),
    ))


def step_agree(run: DemoRun) -> None:
    """The agreement step: the two coders' paired windows, every figure with its cluster-bootstrap CI."""
    assert run.study is not None
    found = study_units(run.study)
    units, dimensions, pairing = found.units, found.dimensions, found.report
    agreement = assess_agreement(units, dimensions, resamples=AGREEMENT_RESAMPLES, seed=run.seed)
    run.summary["dimensions"] = {
        name: {"kappa": headline_kappa(result.figures).as_dict(), "alpha": result.figures["alpha"].as_dict(),
               "percent_agreement": result.figures["percent_agreement"].as_dict(), "band": result.band,
               "units": result.units}
        for name, result in agreement.dimensions.items()
    }
    figures = pd.DataFrame([
        {"dimension": name, "figure": FIGURE_LABELS[key], "value": estimate.value, "low": estimate.low,
         "high": estimate.high}
        for name, result in agreement.dimensions.items() for key in FIGURE_KEYS
        for estimate in (result.figures[key],) if estimate.value is not None
    ])
    window = 40
    drift = drift_figure({d.name: rolling_kappa(units, d, window) for d in dimensions}, window)
    run.sections.append(report.section(
        "Agreement between the coders",
        report.paragraph(f"Paired windows: {pairing['units']} units from {pairing['observations']} coded windows "
                         f"({pairing['unmatched']} windows coded by one coder only). Intervals: 95 % bootstrap "
                         f"resampling the {agreement.clusters} learners, 1000 resamples. The could-not-observe "
                         "code is left out. `fieldmark agree STUDY --report FILE` gives the full report."),
        report.table_html(figures),
        *(report.figure_html(confusion_figure(result), f"confusion matrix of {name}")
          for name, result in agreement.dimensions.items()),
        *([report.figure_html(drift, "rolling kappa")] if drift is not None else []),
    ))


def step_export(run: DemoRun) -> None:
    """The export step: labelled, de-identified windows with their log features."""
    assert run.study is not None
    path = run.out / WINDOWS_FILE
    # the south centre's xAPI log names help requests with a verb IRI; say so, as a lab would
    features = FeatureSettings(help_actions=FeatureSettings().help_actions + (SOUTH_VERBS["help_request"],))
    # the roster columns the study allows out ([export] attributes: the site), as `fieldmark export` does
    settings = ExportSettings(features=features, attributes=run.study.export_attributes)
    exported = export_study(run.study.dir, path, settings=settings, progress=False)
    run.summary["windows"] = {"written": exported["rows"], "path": str(path)}
    counts = pd.DataFrame([{"dimension": dimension, "code": code, "windows": count}
                           for dimension, codes in exported["rows_per_label"].items() for code, count in codes.items()])
    run.sections.append(report.section(
        "Labelled windows for detector training",
        report.paragraph(f"{exported['rows']} windows from {exported['observations']} coded observations "
                         f"({exported['units']} coded by both coders), each with its log features, written to "
                         f"{WINDOWS_FILE} with a manifest beside it. Learners appear only as keyed pseudonyms. "
                         "`fieldmark export STUDY --out FILE` does the same."),
        report.table_html(counts),
    ))


def step_check(run: DemoRun) -> None:
    """The check step: a detector per dimension, cross-validated with folds of whole learners, audited
    per site and across sites (`fieldmark check WINDOWS --by site --transfer site`)."""
    results = check_windows(run.out / WINDOWS_FILE, settings=CheckSettings(by=(SITE,), transfer=SITE, seed=run.seed))
    run.summary["detector"] = {result.dimension: result.as_dict() for result in results}
    rows = [{"dimension": result.dimension, "windows": result.rows, "learners": result.learners,
             "kappa": result.model.kappa, "AUC": result.model.auc, "Brier": result.calibration["brier"],
             "majority baseline kappa": result.majority_baseline.kappa,
             "stratified baseline kappa": result.stratified_baseline.kappa} for result in results]
    sites = pd.DataFrame([{"dimension": result.dimension, "site": group["group"], "learners": group["learners"],
                           "kappa": group["kappa"]["value"], "AUC": group["auc"]["value"],
                           "AUC low": group["auc"]["low"], "AUC high": group["auc"]["high"],
                           "AUC minus rest": group["difference_from_rest"]["auc"]["value"],
                           "low": group["difference_from_rest"]["auc"]["low"],
                           "high": group["difference_from_rest"]["auc"]["high"]}
                          for result in results for group in result.by[SITE] if not group["too_small"]])
    transfer = pd.DataFrame([{"dimension": result.dimension, "tested on": cell["group"],
                              "training learners": cell["training_learners"], "transfer kappa": cell["transfer"]["kappa"],
                              "within kappa": cell["within"]["kappa"], "kappa drop": cell["drop"]["kappa"],
                              "transfer AUC": cell["transfer"]["auc"], "within AUC": cell["within"]["auc"],
                              "AUC drop": cell["drop"]["auc"]}
                             for result in results for cell in result.transfer["leave_one_group_out"]])
    header, _, _ = read_truth(run.out)
    run.sections.append(report.section(
        "Detector check, per site and across sites",
        report.paragraph("Logistic regression on the window features, tuned by nested cross-validation; every fold "
                         "holds whole learners (no learner is ever in both training and test data), out-of-fold "
                         "predictions pooled. `fieldmark check WINDOWS --by site --transfer site` does the same."),
        report.table_html(pd.DataFrame(rows)),
        report.paragraph("Per site: figures with 95 % intervals from resampling learners. Transfer: trained at the "
                         "other centre, beside the centre's own cross-validated figure at the same number of "
                         "training learners."),
        report.table_html(sites), report.table_html(transfer),
        report.paragraph(f"Planted by the generator (truth, not computed): {header['site_behaviour']['expected']}.",
                         "note truth"),
        *(figure_html(bars, f"{result.dimension} by site") for result in results
          for bars in (group_bars(result.by[SITE], f"{result.dimension} by site"),) if bars is not None),
        *(figure_html(heatmap, f"{result.dimension} transfer") for result in results
          for heatmap in (transfer_heatmap(result.transfer, f"{result.dimension}: train on row, test on column"),)
          if heatmap is not None),
    ))


STEPS: tuple[tuple[str, Callable[[DemoRun], None]], ...] = (
    ("generate", step_generate),
    ("align", step_align),
    ("coder_vs_truth", step_coder_vs_truth),
    ("agree", step_agree),
    ("export", step_export),
    ("check", step_check),
)


def run_demo(out: str | Path, seed: int, size: str = "full", progress: bool = True) -> dict:
    """Run every step into ``out``; write summary.json and report.html; return the summary."""
    check_seed(seed)
    check_output_folder(Path(out))
    run = DemoRun(out=Path(out), seed=seed, size=size)
    run.summary = dict.fromkeys(SUMMARY_KEYS)
    run.summary.update(seed=seed, steps=[])
    started = time.perf_counter()
    with tqdm(STEPS, desc="fieldmark demo", unit="step", disable=not progress) as bar:
        for name, step in bar:
            bar.set_postfix_str(name)
            began = time.perf_counter()
            step(run)
            run.summary["steps"].append({"name": name, "seconds": round(time.perf_counter() - began, 2)})
    run.summary["seconds"] = round(time.perf_counter() - started, 2)
    publish_text(run.out / SUMMARY_FILE, json.dumps(run.summary, indent=2) + "\n")
    publish_text(run.out / REPORT_FILE, report.page(f"fieldmark demo (seed {seed})", run.sections))
    return run.summary
