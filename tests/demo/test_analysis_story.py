"""The demo tells its story through the analysis (app/demo/simulator.py): EXP-2's translation
bias grows from 2026-11-02 (fab time, UTC+8) in its own tool frame, on both sides, and lots
L26-4803 (C55) and L26-4806 (C75) run both sides there. These figures come out of the analysis
of the stored fits; nothing here reads the simulator's truth except the onset and the tool."""

from __future__ import annotations

from datetime import timedelta

from app.demo.loader import load_into
from app.demo.simulator import BIAS_ONSET, BIAS_RATE_UM_PER_DAY, BIASED_TOOL
from app.schemas.analysis import AnalysisFilter
from app.services import analysis_drift, analysis_ftb, analysis_lots, analysis_tools

BOTH_SIDES_ON_EXP2 = {"C55": "L26-4803", "C75": "L26-4806"}


def test_the_analysis_tells_the_demo_story(db):
    load_into(db)
    for product, lot in BOTH_SIDES_ON_EXP2.items():
        everything = AnalysisFilter(product=product)

        # Drift: the strongest alarms are EXP-2's translation terms, on both sides, with a
        # change start near the onset (the demo's data begin days after it: the start is
        # dated by the ramp extrapolated back to the fleet's level).
        report = analysis_drift.tool_drift(db=db, filters=everything)
        top = report.alarms[:3]
        assert {a.exposure_tool for a in top} == {BIASED_TOOL}, top
        assert {a.term for a in top} <= {"Tx", "Ty"}
        exp2 = [
            a for a in report.alarms if a.exposure_tool == BIASED_TOOL and a.term in ("Tx", "Ty")
        ]
        assert {a.side for a in exp2} == {"A", "B"}
        for a in exp2:
            assert abs(a.change_start - BIAS_ONSET) <= timedelta(days=4), a
            assert a.size_facing_side > 0  # the bias is + in x and y of EXP-2's own frame
        ramps = [a for a in exp2 if a.change_kind == "ramp"]
        assert ramps and all(0.5 * BIAS_RATE_UM_PER_DAY[0] < a.change_rate
                             < 1.5 * BIAS_RATE_UM_PER_DAY[0] for a in ramps)

        # Shares: EXP-2 first for the lot that ran both sides there, and for the product.
        shares = analysis_ftb.ftb_shares(db=db, filters=everything)
        by_lot = {x.lot: x for x in shares.by_lot}
        assert by_lot[lot].by_exposure_tool[0].group == BIASED_TOOL
        assert by_lot[lot].by_exposure_tool[0].share > 0.8
        assert shares.by_exposure_tool[0].group == BIASED_TOOL

        # Fingerprints: the bias shows in EXP-2's own frame (+Tx, +Ty on both sides), beyond
        # its interval and beyond the rest of the fleet; and EXP-2 adds most to FTB.
        fp = analysis_tools.tool_fingerprints(db=db, filters=everything, by_layer=False)
        for row in (r for r in fp.rows if r.exposure_tool == BIASED_TOOL):
            for term in row.terms_facing_side[:2]:
                assert term.mean > term.half_width > 0
            for diff in row.difference_facing_side[:2]:
                assert diff.mean > diff.half_width
        assert fp.what_if[0].exposure_tool == BIASED_TOOL and fp.what_if[0].adds_um > 1.0

        # Lots: every panel counted once, and the forecast share within limit is a share.
        lots = analysis_lots.lot_summary(db=db, filters=everything)
        assert sum(x.panels for x in lots.lots) == sum(sum(x.by_risk.values())
                                                       for x in lots.lots)
        assert all(0.0 <= (x.forecast_within_limit or 0.0) <= 1.0 for x in lots.lots)
