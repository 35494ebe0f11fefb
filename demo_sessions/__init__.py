"""Seeded generator of the demo study: apprentice electricians on a panel-wiring simulator.

``python -m demo_sessions --out DIR --seed N`` (or ``fieldmark demo``) writes DIR/study,
each coder laptop's store under DIR/devices/ and the truth files beside them.  Modules,
each named after what it decides:

    scenario.py       every number: centres, learners, sessions, coders, clock ranges
    latent_states.py  what each apprentice is really doing, second by second
    simulator_log.py  what the simulator logs given those states
    log_files.py      how each centre writes its log (CSV with local times, xAPI lines)
    clocks.py         how each coder laptop's clock differs from the log server's
    coders.py         what the coders see and record, turn by turn (via RoundRobin)
    study_writer.py   the study folder and device stores, written as the app would
    truth_files.py    what the generator knows, kept outside the study folder
    truth_check.py    simulated coders against the truth (a demo-quality check)
    generate.py       one run, in order, into a temporary name then renamed
copy/ holds a small generated copy (``--size small --seed 1``) the app can open at once.
"""

from pathlib import Path


def committed_copy() -> Path:
    """The small generated demo study shipped with fieldmark, ready to open in the app."""
    return Path(__file__).resolve().parent / "copy" / "study"
