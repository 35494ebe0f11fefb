"""Agreement with the partner's imported session, shown at the end of a paired session."""
from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import cohen_kappa_score

from observer_app.coding.live import LiveSession
from observer_app.coding.end_agreement import partner_agreement
from observer_app.coding.clock import FakeClock
from observer_app.study.store import Store
from observer_app.ui.end_screen import EndScreen

ACTIVITY_KEYS = {"1": "on_task", "3": "off_task", "4": "rapid_guessing"}
AFFECT_KEYS = {"q": "focused", "w": "confused", "e": "frustrated", "r": "bored"}


def test_end_of_a_paired_session_reports_kappa_against_the_imported_partner(study, qtbot):
    rng = np.random.default_rng(7)
    clocks = [FakeClock(monotonic=100.0), FakeClock(monotonic=90000.0)]
    shared = clocks[0].now_utc()
    stores = [Store(study.store_path), Store(study.store_path)]  # as if the partner's store was imported
    ana, ben = (LiveSession.start(study, store, clock, coder=coder, device=device, typed_clock_difference_s=0.0, paired_start=shared)
                for store, clock, coder, device in zip(stores, clocks, ("ana", "ben"), ("laptop-1", "laptop-2")))
    codes = {"ana": {"activity": [], "affect": []}, "ben": {"activity": [], "affect": []}}
    for _ in range(60):  # 60 windows of 20 s
        truth = (rng.choice(list(ACTIVITY_KEYS)), rng.choice(list(AFFECT_KEYS)))
        for session, coder in ((ana, "ana"), (ben, "ben")):
            activity, affect = (key if rng.random() < 0.8 else rng.choice(list(keys))
                                for key, keys in zip(truth, (ACTIVITY_KEYS, AFFECT_KEYS)))
            session.press(activity)
            session.press(affect)
            codes[coder]["activity"].append(ACTIVITY_KEYS[activity])
            codes[coder]["affect"].append(AFFECT_KEYS[affect])
        for clock in clocks:
            clock.advance(20)
        ana.tick()
        ben.tick()
    summary = ana.end()
    ben.end()
    result = partner_agreement(study, ana.session_id)
    assert result is not None and result.partners == ("ben",) and result.units == 60
    for dimension in ("activity", "affect"):
        # reference: scikit-learn's Cohen's kappa on the same two code sequences
        expected = cohen_kappa_score(codes["ana"][dimension], codes["ben"][dimension])
        assert result.kappa[dimension].value == pytest.approx(expected, abs=1e-9)
        assert result.kappa[dimension].low <= expected <= result.kappa[dimension].high
    screen = EndScreen(study, summary, agreement=lambda: result)
    qtbot.addWidget(screen)
    qtbot.waitUntil(lambda: "Agreement with ben over 60 windows" in screen.agreement.text())
    assert f"{result.kappa['activity'].value:.3f}" in screen.agreement.text()
    for store in stores:
        store.close()


def test_no_agreement_before_the_partner_is_imported_or_for_a_solo_session(study, store, clock):
    paired = LiveSession.start(study, store, clock, coder="ana", device="laptop-1", typed_clock_difference_s=0.0, paired_start=clock.now_utc())
    paired.press("1")
    solo = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    solo.press("1")
    assert partner_agreement(study, paired.session_id) is None
    assert partner_agreement(study, solo.session_id) is None
