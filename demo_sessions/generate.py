"""One generation run, in order: learners, latent states, simulator logs, clocks, coders,
then the study folder, the device stores, the import and the truth files.

Fully determined by (seed, size): every random draw comes from child streams of
``numpy.random.SeedSequence(seed)``, every id from ``uuid5`` of seed-derived text, every
time from the scenario's calendar; nothing reads the wall clock.  Output layout:

    DIR/study/                     the study folder (open it with the app or any verb)
    DIR/devices/<device>/observations.sqlite   each coder laptop's own store
    DIR/truth.json, DIR/truth_states.parquet, DIR/truth_windows.parquet   (truth_files.py)

Everything is built under a temporary name inside DIR and renamed at the end, so a
failed run leaves nothing half-written.
"""
from __future__ import annotations

import shutil
import zoneinfo
from dataclasses import asdict, dataclass
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd

from demo_sessions.clocks import DeviceClock, draw_clocks
from demo_sessions.coders import CodingRecord, CodingSession, simulate_coding
from demo_sessions.latent_states import state_segments, simulate_latent_states
from demo_sessions.log_files import write_north_csv, write_south_xapi
from demo_sessions.scenario import ACTIVITY_STATES, AFFECT_STATES, SIZES, Scenario
from demo_sessions.simulator_log import BEHAVIOUR_ACTION_RATE, BEHAVIOUR_HELP_SCALE, simulate_log
from demo_sessions.study_writer import import_devices, write_device_store, write_study_files
from demo_sessions.truth_files import TRUTH_JSON, TRUTH_STATES, TRUTH_WINDOWS, write_truth
from observer_app.study.scheme import load_scheme
from observer_app.study.folder import SCHEME_FILE
from sync.errors import InputError

STUDY_DIR = "study"
DEVICES_DIR = "devices"
OUTPUTS = (STUDY_DIR, DEVICES_DIR, TRUTH_JSON, TRUTH_STATES, TRUTH_WINDOWS)


@dataclass(frozen=True)
class Generated:
    """Where the run wrote, and the figures a caller may want to print."""

    out: Path
    study: Path
    device_stores: tuple[Path, ...]
    clocks: tuple[DeviceClock, ...]
    learners: int
    events: int
    observations: int
    sync_marks: int


def _utc_ns(day: str, clock_time: str, timezone: str) -> int:
    local = datetime.fromisoformat(f"{day}T{clock_time}:00").replace(tzinfo=zoneinfo.ZoneInfo(timezone))
    return int(pd.Timestamp(local).value)


def check_seed(seed: int) -> None:
    """InputError unless ``seed`` is a whole number numpy's SeedSequence accepts (0 or more)."""
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise InputError(None, "--seed", f"{seed!r} is not a whole number 0 or more")


def check_output_folder(out: Path) -> None:
    """InputError unless ``out`` is new or holds none of the generator's outputs."""
    if out.exists() and not out.is_dir():
        raise InputError(out, None, "is a file; give a folder for --out")
    clashes = [name for name in OUTPUTS if (out / name).exists()]
    if clashes:
        raise InputError(out / clashes[0], None, "already exists; choose an empty --out folder")


def generate_demo(out: str | Path, seed: int, size: str = "full") -> Generated:
    """Build the demo under ``out`` (see the module docstring); InputError if ``out`` already holds one."""
    out = Path(out)
    scenario = SIZES[size]
    check_seed(seed)
    check_output_folder(out)
    out.mkdir(parents=True, exist_ok=True)
    building = out / f".building-{seed}"
    shutil.rmtree(building, ignore_errors=True)
    building.mkdir()
    try:
        generated = _generate_into(building, scenario, seed, size)
        for name in OUTPUTS:
            (building / name).rename(out / name)
    finally:
        shutil.rmtree(building, ignore_errors=True)
    return Generated(out=out, study=out / STUDY_DIR,
                     device_stores=tuple(out / DEVICES_DIR / c.device / "observations.sqlite" for c in generated.clocks),
                     clocks=generated.clocks, learners=generated.learners, events=generated.events,
                     observations=generated.observations, sync_marks=generated.sync_marks)


def _generate_into(directory: Path, scenario: Scenario, seed: int, size: str) -> Generated:
    streams = [np.random.default_rng(child) for child in np.random.SeedSequence(seed).spawn(5)]
    names_rng, states_rng, log_rng, clock_rng, coder_rng = streams
    per_centre = scenario.learners_per_centre
    learners = [f"L{index + 1:02d}" for index in range(scenario.learners)]
    numbers = names_rng.choice(np.arange(1000, 10000), size=scenario.learners, replace=False)
    centre_of = [centre for centre in scenario.centres for _ in range(per_centre)]
    log_ids = np.array([f"{c.learner_prefix}-{n}" for c, n in zip(centre_of, numbers)])
    roster = pd.DataFrame({
        "learner": learners, "label": [f"{c.name.capitalize()} bench {i % per_centre + 1}" for i, c in enumerate(centre_of)],
        "log_id": log_ids, "site": [c.name for c in centre_of],
        "cohort": ["A" if i % per_centre < per_centre / 2 else "B" for i in range(scenario.learners)],
    })

    margin_ns = int(scenario.margin_minutes * 60 * 1e9)
    seconds = int((scenario.coded_minutes + 2 * scenario.margin_minutes) * 60)
    coding_start = [_utc_ns(c.session_day, c.session_start, scenario.timezone) for c in scenario.centres]
    grid_start_ns = np.repeat(np.array(coding_start, dtype=np.int64) - margin_ns, per_centre)
    states = simulate_latent_states(states_rng, scenario.learners, seconds)
    behaviour = np.repeat([c.behaviour for c in scenario.centres], per_centre)
    events = simulate_log(log_rng, states, grid_start_ns, behaviour)
    clocks = draw_clocks(clock_rng, scenario.devices, scenario.offset_ranges, scenario.drift_ranges, coding_start[0])
    sessions = tuple(
        CodingSession(centre=c.name, learners=tuple(learners[i * per_centre:(i + 1) * per_centre]),
                      chains=np.arange(i * per_centre, (i + 1) * per_centre),
                      grid_start_ns=int(coding_start[i] - margin_ns), coding_start_ns=coding_start[i])
        for i, c in enumerate(scenario.centres))
    record = simulate_coding(coder_rng, scenario, seed, clocks, states, events, sessions)

    study = directory / STUDY_DIR
    write_study_files(study, scenario, seed, roster)
    for index, centre in enumerate(scenario.centres):
        mine = events[(events["chain"] >= index * per_centre) & (events["chain"] < (index + 1) * per_centre)]
        if centre.log_format == "csv":
            write_north_csv(study / centre.log_file, mine, log_ids, scenario.timezone)
        else:
            write_south_xapi(study / centre.log_file, mine, log_ids, seed)
    scheme_hash = load_scheme(study / SCHEME_FILE).content_hash
    device_paths = [directory / DEVICES_DIR / clock.device / "observations.sqlite" for clock in clocks]
    for clock, path in zip(clocks, device_paths):
        write_device_store(path, clock.device, record, scheme_hash)
    import_devices(study, device_paths)

    segments = pd.concat([
        state_segments(states.activity, ACTIVITY_STATES, learners, grid_start_ns, "activity"),
        state_segments(states.affect, AFFECT_STATES, learners, grid_start_ns, "affect"),
    ], ignore_index=True)
    write_truth(directory, _truth_header(scenario, seed, size, clocks, coding_start, margin_ns, seconds,
                                         roster, events, record), segments, record.truth)
    return Generated(out=directory, study=study, device_stores=tuple(device_paths), clocks=clocks,
                     learners=scenario.learners, events=len(events), observations=len(record.observations),
                     sync_marks=len(record.marks))


def site_behaviour(scenario: Scenario) -> dict:
    """What the generator planted about how each centre's apprentices work, and what it implies."""
    centres = {c.name: {"behaviour": c.behaviour,
                        "actions_per_second": dict(zip(ACTIVITY_STATES, BEHAVIOUR_ACTION_RATE[c.behaviour].tolist())),
                        "help_request_scale": BEHAVIOUR_HELP_SCALE[c.behaviour]} for c in scenario.centres}
    shared = sorted(name for name, figures in centres.items() if figures["behaviour"] == "shared_bench")
    own = sorted(name for name, figures in centres.items() if figures["behaviour"] == "own_bench")
    planted = bool(shared and own)
    return {
        "centres": centres, "planted": planted,
        "expected": (f"activity is harder to detect from the log at {', '.join(shared)} (apprentices share a bench, "
                     f"which keeps logging while one of them talks, is off task or away): the activity AUC of a "
                     f"detector trained on both centres is lower there than at {', '.join(own)}, and a detector "
                     f"trained at {', '.join(shared)} loses much of its skill at {', '.join(own)}")
                    if planted else "no difference between centres was planted",
        "metric": {"dimension": "activity", "figure": "auc", "attribute": "site", "lower": shared} if planted else None,
    }


def _iso(ns: int) -> str:
    return pd.Timestamp(ns, tz="UTC").isoformat()


def _truth_header(scenario: Scenario, seed: int, size: str, clocks: tuple[DeviceClock, ...], coding_start: list[int],
                  margin_ns: int, seconds: int, roster: pd.DataFrame, events: pd.DataFrame,
                  record: CodingRecord) -> dict:
    return {
        "seed": seed,
        "size": size,
        "clock_model": "device time = log time + offset_s + drift_ppm * 1e-6 * (log time - reference)",
        "devices": {clock.device: {"coder": coder, "offset_s": clock.offset_s, "drift_ppm": clock.drift_ppm,
                                   "reference": _iso(clock.reference_ns)}
                    for clock, coder in zip(clocks, scenario.coders)},
        "ranges": {clock.device: {"offset_s": list(offsets), "drift_ppm": list(drifts)}
                   for clock, offsets, drifts in zip(clocks, scenario.offset_ranges, scenario.drift_ranges)},
        "sessions": [{"centre": c.name, "log_format": c.log_format, "log_file": c.log_file,
                      "coding_start": _iso(start), "grid_start": _iso(start - margin_ns),
                      "grid_end": _iso(start - margin_ns + seconds * 1_000_000_000)}
                     for c, start in zip(scenario.centres, coding_start)],
        "learners": {row.learner: {"log_id": row.log_id, "centre": row.site} for row in roster.itertuples()},
        "site_behaviour": site_behaviour(scenario),
        "counts": {"learners": scenario.learners, "events": len(events),
                   "observations": len(record.observations), "sync_marks": len(record.marks)},
        "scenario": {key: value for key, value in asdict(scenario).items() if key != "centres"},
    }
