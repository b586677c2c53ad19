"""Benchmark: the exam page of a fluoroscopy study against that of a radiograph (issue #23).

The exam page of a study of tens of exposures took over 15 s under load: a spectrum chart and a
beam computed per exposure. Now a study of many exposures gets one chart of its distinct beams
and the beams are kept per process. On the demo's store (``beamaudit demo --no-serve``; give its
folder as the argument, or ``$BEAMAUDIT_BENCH_DEMO_DIR``; without one the four-month demo is
made first, about a minute), the page of every ANGIO 1 study (``HGH-IR1``, skin-dose map
included) and of the demo's 34-exposure barium enema is made in process, warm (after one
making each), and timed against the page of a one-exposure radiograph made in the same run (the
baseline).

Target: each fluoroscopy page within 4 x the radiograph's (a few hundred ms on a free core).
Plain script: ``python benchmarks/bench_exam_page.py [DEMO_DIR]``.
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TARGET_RATIO = 4.0
ROUNDS = 5


def _demo_folder(argv: list[str], work: Path) -> Path:
    given = argv[1] if len(argv) > 1 else os.environ.get("BEAMAUDIT_BENCH_DEMO_DIR")
    if given:
        return Path(given)
    folder = work / "demo"
    subprocess.run(
        [sys.executable, "-m", "beamaudit", "demo", "--no-serve", "--months", "4", "--seed", "0",
         "--output", str(folder)],
        check=True, capture_output=True,
    )  # fmt: skip
    return folder


def _time(make: object, rounds: int = ROUNDS) -> float:
    """Median CPU seconds of ``make()`` over ``rounds``, after one warm-up making."""
    make()  # type: ignore[operator]
    times = []
    for _ in range(rounds):
        start = time.process_time()
        make()  # type: ignore[operator]
        times.append(time.process_time() - start)
    return statistics.median(times)


def main(argv: list[str]) -> int:
    from sqlalchemy import func, select

    from beamaudit.api.store import make_engine, make_session_factory
    from beamaudit.api.store import models as m
    from beamaudit.api.web import pages

    with tempfile.TemporaryDirectory(prefix="beamaudit-bench-exam-") as tmp:
        folder = _demo_folder(argv, Path(tmp))
        engine = make_engine(f"sqlite:///{(folder / 'beamaudit-demo.db').resolve()}")
        sessions = make_session_factory(engine)
        with sessions() as session:
            per_study = (
                select(m.Study.study_instance_uid, m.Room.name, func.count(m.ExposureEventRow.id))
                .join(m.ExposureEventRow, m.ExposureEventRow.study_id == m.Study.id)
                .join(m.Room, m.Room.id == m.ExposureEventRow.room_id)
                .group_by(m.Study.id, m.Room.name)
            )
            studies = session.execute(per_study).all()
        radiograph = next(uid for uid, room, n in studies if room == "HGH-RAD1" and n == 1)
        fluoro = [(uid, room, n) for uid, room, n in studies if room == "HGH-IR1"]
        fluoro += sorted((s for s in studies if s[1] == "HGH-FL1"), key=lambda s: -s[2])[:1]

        def page(uid: str) -> object:
            def make() -> None:
                with sessions() as session:
                    pages._exam(session, uid, None)

            return make

        baseline = _time(page(radiograph))
        print(f"baseline: the exam page of a one-exposure radiograph, {baseline * 1000:.0f} ms CPU")
        worst = 0.0
        for uid, room, n in fluoro:
            spent = _time(page(uid))
            worst = max(worst, spent / baseline)
            print(f"{room}, {n} exposures: {spent * 1000:.0f} ms CPU, "
                  f"ratio {spent / baseline:.1f}")  # fmt: skip
        engine.dispose()
    met = worst <= TARGET_RATIO
    print(f"worst ratio {worst:.1f} (target <= {TARGET_RATIO:g}): {'met' if met else 'NOT met'}")
    return 0 if met else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv))
