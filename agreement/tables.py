"""Column contracts of the tables agreement/ produces and consumes.  One place, on purpose.

Input: the OBSERVATIONS table documented in observer_app/study/tables.py (one column per
scheme dimension holding code names, NA when not coded), or a long-format CSV read
by ``agreement.long_format.read_long_csv``.

UNITS -- ``agreement.pairing.pair_observations`` returns it; long format, one row per
coder per unit (a unit is one thing coded by two or more coders):
    unit            string   stable id: the first 12 hex digits of sha1 over the sorted
                             observation ids joined by "|" (CSV input: the CSV's unit);
                             adjudications are kept by their observations, not this id
                             (agreement.disagreements.place_adjudications)
    coder           string   who coded
    learner         string   the observed learner; the cluster the bootstrap resamples
                             (CSV without a learner column: the unit itself)
    session_id      string   the coding session the row came from ("" when unknown)
    time            datetime window start of the row on the log's clock (UTC; NaT when unknown)
    observation_id  string   the observation row ("" for CSV input)
    matched_by      string   "slot" (paired run: same start, slot and learner), "time"
                             (same learner, window starts within the tolerance), "clip"
                             (replay of the same clip) or "given" (CSV unit column)
    note            string   the coder's note ("" when none)
    <dimension>     string   the code name, NA when not coded

DISAGREEMENTS -- ``agreement.disagreements.list_disagreements``; one row per unit,
dimension and pair of coders whose codes differ:
    unit, dimension, learner, time, coder_a, code_a, coder_b, code_b,
    notes (the coders' notes joined by " | "), adjudicated_code ("" when none)

ADJUDICATION INPUT -- the CSV ``fieldmark adjudicate`` reads:
    unit, dimension, code, adjudicator, reason

ROLLING -- ``agreement.breakdowns.rolling_kappa``: position (1-based number of the window's
    last unit in time order), time (of that unit), units (in the window), kappa (float,
    NaN when undefined).

JSON -- ``fieldmark agree --json`` prints one object; ``JSON_TOP_KEYS`` are its keys,
``JSON_DIMENSION_KEYS`` the keys of each entry of "dimensions".  Every figure is an
object {"value", "low", "high"}: the point value and the 95 % cluster-bootstrap
interval; null where the figure is undefined (e.g. kappa with a single category).
"""
from __future__ import annotations

UNIT_COLUMNS: tuple[str, ...] = (
    "unit", "coder", "learner", "session_id", "time", "observation_id", "matched_by", "note",
)
DISAGREEMENT_COLUMNS: tuple[str, ...] = (
    "unit", "dimension", "learner", "time", "coder_a", "code_a", "coder_b", "code_b", "notes",
    "adjudicated_code",
)
ADJUDICATION_INPUT_COLUMNS: tuple[str, ...] = ("unit", "dimension", "code", "adjudicator", "reason")
ROLLING_COLUMNS: tuple[str, ...] = ("position", "time", "units", "kappa")

# Columns a long-format CSV may carry besides unit, coder and the dimensions.
LONG_FORMAT_KEY_COLUMNS: tuple[str, ...] = ("unit", "coder")
LONG_FORMAT_OPTIONAL_COLUMNS: tuple[str, ...] = ("learner", "session_id", "time", "note")

MATCHED_BY_SLOT = "slot"
MATCHED_BY_TIME = "time"
MATCHED_BY_CLIP = "clip"
MATCHED_BY_GIVEN = "given"

JSON_TOP_KEYS: tuple[str, ...] = (
    "source",          # the study folder or CSV file
    "coders",          # coders whose codes were compared
    "units",           # units compared (all dimensions)
    "clusters",        # learners (bootstrap clusters)
    "resamples",       # bootstrap resamples
    "seed",            # bootstrap seed
    "confidence",      # 0.95
    "pairing",         # study only: observations, units, paired_observations, unmatched,
                       # unmatched_by_coder, units_by_method, paired_run_not_overlapping (paired-run
                       # observations left unpaired: no overlap on the log's clock), clock ("log" once
                       # every live device is aligned, else "device"), pairing_tolerance_s,
                       # unplaced_adjudications (settling observations no unit holds now)
    "dimensions",      # {dimension name: JSON_DIMENSION_KEYS}
    "by",              # --by pair|session: list of {"pair"|"session", "dimensions"}, else null
    "certification",   # --certify CODER: per coder and dimension, else null
)

# Figures with a {"value","low","high"} object, in the order the table prints them.
FIGURE_KEYS: tuple[str, ...] = (
    "percent_agreement",        # share of agreeing coder pairs within units (0..1)
    "cohen_kappa",              # Cohen (1960); exactly two coders, else null
    "cohen_kappa_linear",       # linear weights; ordinal/interval/ratio only
    "cohen_kappa_quadratic",    # quadratic weights; ordinal/interval/ratio only
    "fleiss_kappa",             # Fleiss (1971), units with >= 2 codes
    "alpha",                    # Krippendorff's alpha at the dimension's level
    "alpha_nominal",
    "alpha_ordinal",            # null for nominal dimensions
    "alpha_interval",           # null unless the level is interval or ratio
    "alpha_ratio",              # null unless the level is ratio
    "pabak",                    # Byrt, Bishop & Carlin (1993): (k * p_o - 1) / (k - 1)
    "max_kappa",                # Cohen (1960): kappa attainable under the observed marginals
)

JSON_DIMENSION_KEYS: tuple[str, ...] = (
    "level",               # nominal | ordinal | interval | ratio
    "codes",               # the codes compared, in order
    "units",               # units with at least two codes on this dimension
    "coders",
    *FIGURE_KEYS,
    "band",                # Landis & Koch (1977) label of the headline kappa ("undefined" when null)
    "per_code_kappa",      # {code: figure}: one-vs-rest Cohen's kappa on the pooled coder pairs
    "confusion",           # {"rows", "columns" (coder names), "codes", "counts" (rows x columns)}
    "could_not_observe",   # {"code", "included", "codes" (count), "units_one_coder_could_not"}
)

# How the human table and the HTML report name each figure.
FIGURE_LABELS: dict[str, str] = {
    "percent_agreement": "Percent agreement",
    "cohen_kappa": "Cohen's kappa",
    "cohen_kappa_linear": "Cohen's kappa, linear weights",
    "cohen_kappa_quadratic": "Cohen's kappa, quadratic weights",
    "fleiss_kappa": "Fleiss' kappa",
    "alpha": "Krippendorff's alpha (dimension's level)",
    "alpha_nominal": "Krippendorff's alpha, nominal",
    "alpha_ordinal": "Krippendorff's alpha, ordinal",
    "alpha_interval": "Krippendorff's alpha, interval",
    "alpha_ratio": "Krippendorff's alpha, ratio",
    "pabak": "PABAK",
    "max_kappa": "Maximum kappa under the marginals",
}
