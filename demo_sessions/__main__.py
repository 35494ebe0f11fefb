"""``python -m demo_sessions --out DIR [--seed N] [--size full|small]``: generate the demo study."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from demo_sessions.generate import generate_demo
from demo_sessions.scenario import SIZES
from sync.errors import InputError


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m demo_sessions", description=__doc__)
    parser.add_argument("--out", type=Path, required=True, help="output folder (study/, devices/, truth files)")
    parser.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    parser.add_argument("--size", choices=sorted(SIZES), default="full", help="full demo or the small committed copy")
    args = parser.parse_args(argv)
    try:
        generated = generate_demo(args.out, args.seed, args.size)
    except InputError as error:
        sys.stderr.write(f"demo_sessions: {error.line()}\n")
        return 2
    print(f"demo study in {generated.study}: {generated.learners} learners, {generated.events} log events, "
          f"{generated.observations} coded windows, {generated.sync_marks} sync marks")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
