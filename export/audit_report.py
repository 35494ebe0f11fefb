"""`fieldmark check --report FILE`: the check and its audit as one self-contained HTML page.

Figures are drawn with matplotlib's object API (``Figure`` objects, no pyplot state, no
backend switch) and embedded as base64 PNG, so the page opens anywhere without a server.
Every piece of text that comes from the data (dimension, code, group and attribute names)
is HTML-escaped.  Input: the JSON object `fieldmark check --json` prints.
"""
from __future__ import annotations

import base64
import html
import io

from matplotlib.figure import Figure

STYLE = """
body { font-family: system-ui, sans-serif; max-width: 1100px; margin: 2em auto; color: #222; }
h2 { border-bottom: 1px solid #ccc; padding-bottom: .2em; margin-top: 2em; }
table { border-collapse: collapse; margin: .8em 0; font-size: .92em; }
th, td { border: 1px solid #ccc; padding: .25em .6em; text-align: right; }
th { background: #f0f0f0; } td:first-child, th:first-child { text-align: left; }
.note { color: #555; font-size: .92em; } img { max-width: 100%; }
"""
CAUTION = ("Subgroup figures from small samples are uncertain: read the intervals, not the points. "
           "A detector makes mistakes, more for some groups than others; it must never be the sole basis "
           "of a decision about a person.")


def _escape(value: object) -> str:
    return html.escape(str(value), quote=True)


def figure_html(figure: Figure, alt: str) -> str:
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=90, bbox_inches="tight", metadata={"Software": None})
    encoded = base64.b64encode(buffer.getvalue()).decode("ascii")
    return f'<img alt="{_escape(alt)}" src="data:image/png;base64,{encoded}">'


def _number(value: float | None) -> str:
    return "" if value is None else f"{value:.3f}"


def _interval(estimate: dict | None) -> str:
    if not estimate or estimate.get("value") is None:
        return ""
    if estimate.get("low") is None:
        return _number(estimate["value"])
    return f"{estimate['value']:.3f} [{estimate['low']:.3f}, {estimate['high']:.3f}]"


def _table(header: list[str], rows: list[list[str]]) -> str:
    head = "".join(f"<th>{_escape(cell)}</th>" for cell in header)
    body = "".join("<tr>" + "".join(f"<td>{_escape(cell)}</td>" for cell in row) + "</tr>" for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def group_bars(groups: list[dict], title: str) -> Figure | None:
    """Kappa per scored group with its 95 % interval as an error bar."""
    scored = [group for group in groups if not group["too_small"] and group["kappa"]["value"] is not None]
    if not scored:
        return None
    figure = Figure(figsize=(7, 0.6 + 0.45 * len(scored)))
    axis = figure.add_subplot()
    values = [group["kappa"]["value"] for group in scored]
    low = [group["kappa"]["value"] - (group["kappa"]["low"] if group["kappa"]["low"] is not None else group["kappa"]["value"])
           for group in scored]
    high = [(group["kappa"]["high"] if group["kappa"]["high"] is not None else group["kappa"]["value"]) - group["kappa"]["value"]
            for group in scored]
    positions = range(len(scored))
    axis.barh(list(positions), values, xerr=[low, high], color="#6a8caf", capsize=4)
    axis.set_yticks(list(positions), [f"{g['group']} ({g['learners']} learners)" for g in scored])
    axis.axvline(0, color="#444", linewidth=0.8)
    axis.set_xlabel("Cohen's kappa, 95 % learner-bootstrap interval")
    axis.set_title(title, fontsize=10)
    return figure


def transfer_heatmap(transfer: dict, title: str) -> Figure | None:
    """Train-on-row / test-on-column kappa; each cell also names the within-group figure."""
    if not transfer or not transfer.get("matrix"):
        return None
    groups = transfer["groups"]
    index = {group: number for number, group in enumerate(groups)}
    grid = [[float("nan")] * len(groups) for _ in groups]
    figure = Figure(figsize=(1.6 + 1.3 * len(groups), 1.2 + 1.0 * len(groups)))
    axis = figure.add_subplot()
    for cell in transfer["matrix"]:
        value = cell["transfer"]["kappa"]
        grid[index[cell["train"]]][index[cell["test"]]] = float("nan") if value is None else value
        within = cell["within"]["kappa"]
        axis.text(index[cell["test"]], index[cell["train"]],
                  f"{_number(value) or '-'}\nwithin {_number(within) or '-'}", ha="center", va="center", fontsize=8)
    image = axis.imshow(grid, cmap="RdYlGn", vmin=-0.2, vmax=1.0)
    axis.set_xticks(range(len(groups)), [f"test {g}" for g in groups])
    axis.set_yticks(range(len(groups)), [f"train {g}" for g in groups])
    figure.colorbar(image, ax=axis, label="transfer kappa")
    axis.set_title(title, fontsize=10)
    return figure


def reliability_figure(calibration: dict, title: str) -> Figure:
    """Mean predicted probability against observed share per bin, with the diagonal."""
    figure = Figure(figsize=(4.5, 4.2))
    axis = figure.add_subplot()
    bins = calibration["reliability"]
    axis.plot([0, 1], [0, 1], color="#999", linestyle="--", linewidth=0.8)
    axis.plot([b["mean_predicted"] for b in bins], [b["observed"] for b in bins], marker="o", color="#2b6a99")
    axis.set_xlim(0, 1)
    axis.set_ylim(0, 1)
    axis.set_xlabel("mean predicted probability")
    axis.set_ylabel("observed share")
    axis.set_title(title, fontsize=10)
    return figure


def _group_rows(groups: list[dict]) -> list[list[str]]:
    rows = []
    for group in groups:
        if group["too_small"]:
            rows.append([group["group"], str(group["learners"]), str(group["windows"]), "too small", "", "", "", "", ""])
            continue
        difference = group["difference_from_rest"] or {}
        rows.append([group["group"], str(group["learners"]), str(group["windows"]), _interval(group["kappa"]),
                     _interval(group["auc"]), _interval(difference.get("kappa")),
                     _number(group["majority_baseline"]["kappa"]), _number(group["stratified_baseline"]["kappa"]),
                     _interval(group["coder_agreement"])])
    return rows


GROUP_HEADER = ["group", "learners", "windows", "kappa [95 %]", "AUC [95 %]", "kappa minus rest [95 %]",
                "majority baseline kappa", "stratified baseline kappa", "coder agreement [95 %]"]


def _dimension_section(name: str, result: dict, payload: dict) -> str:
    parts = [f"<h2>{_escape(name)}</h2>",
             _table(["windows", "learners", "folds", "kappa", "AUC", "Brier", "majority kappa", "stratified kappa"],
                    [[str(result["rows"]), str(result["learners"]), str(result["folds"]), _number(result["model"]["kappa"]),
                      _number(result["model"]["auc"]), _number(result["calibration"]["brier"]),
                      _number(result["majority_baseline"]["kappa"]), _number(result["stratified_baseline"]["kappa"])]]),
             f'<p class="note">AUC: {_escape(result["auc_definition"])}. Brier: '
             f'{_escape(result["calibration"]["brier_definition"])}. Settings chosen per outer fold: '
             f'{_escape(result["chosen_settings"])}.</p>',
             figure_html(reliability_figure(result["calibration"], f"reliability of {name}"), f"reliability curve of {name}")]
    for attribute, groups in result["by"].items():
        parts.append(f"<h3>{_escape(name)} by {_escape(attribute)}</h3>")
        parts.append(_table(GROUP_HEADER, _group_rows(groups)))
        bars = group_bars(groups, f"{name} by {attribute}")
        if bars is not None:
            parts.append(figure_html(bars, f"{name} kappa by {attribute}"))
    if result.get("label_routes"):
        parts.append(f"<h3>{_escape(name)} by how the label was reached</h3>")
        parts.append(_table(GROUP_HEADER, _group_rows(result["label_routes"])))
    transfer = result.get("transfer")
    if transfer:
        parts.append(f"<h3>{_escape(name)}: transfer across {_escape(payload['transfer'])}</h3>")
        parts.append(_table(["test group", "training learners", "transfer kappa", "within kappa", "drop"],
                            [[cell["group"], str(cell["training_learners"]), _number(cell["transfer"]["kappa"]),
                              _number(cell["within"]["kappa"]), _number(cell["drop"]["kappa"])]
                             for cell in transfer["leave_one_group_out"]]))
        if transfer["too_small"]:
            parts.append(f'<p class="note">Left out, too few learners: {_escape(", ".join(transfer["too_small"]))}</p>')
        heatmap = transfer_heatmap(transfer, f"{name}: train on row, test on column")
        if heatmap is not None:
            parts.append(figure_html(heatmap, f"{name} transfer matrix"))
    return "\n".join(parts)


def audit_report(payload: dict) -> str:
    """The whole page for one `fieldmark check` result."""
    intro = (f"Model {payload['model']}, tuned by nested cross-validation ({payload['folds']} outer and "
             f"{payload['inner_folds']} inner folds, every fold of whole learners); intervals are 95 % learner-cluster "
             f"bootstrap ({payload['resamples']} resamples); groups under {payload['min_learners']} learners are not scored. "
             f"Training weights: {payload['weight']}.")
    sections = [_dimension_section(name, result, payload) for name, result in payload["dimensions"].items()]
    return (f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>Detector check: "
            f"{_escape(payload['windows'])}</title><style>{STYLE}</style></head><body>\n"
            f"<h1>Detector check: {_escape(payload['windows'])}</h1>\n<p>{_escape(intro)}</p>\n"
            f"<p class=\"note\"><strong>Caution.</strong> {_escape(CAUTION)}</p>\n" + "\n".join(sections)
            + "\n</body></html>\n")
