"""Where the time of one POST /api/v1/measurements goes (used by benchmarks/posts.py).

Two measurements on one store, in this process, no concurrency: sequential POSTs through
fastapi.testclient with ``measurements.accept`` wrapped (what is left of a POST is HTTP, auth,
routing, JSON parse and validation, and the answer's serialisation); then as many
``measurements.accept`` calls under cProfile (the profiler sees only this thread, so accept is
called directly, with the body parsed by ``MeasurementCreate.model_validate_json`` outside the
profile and timed on its own), grouped by the pipeline's functions.
"""

from __future__ import annotations

import cProfile
import io
import pstats
import statistics
import time
from pathlib import Path
from typing import Any

import _data
from sqlalchemy import event

from app.db import Database
from app.services import keys

#: Groups of one POST's time inside measurements.accept: (label, module file, function name).
#: Cumulative times; a group nested in another is subtracted from it below.
GROUPS = (
    ("read: panels, fits in force (prepare's queries)", "intake.py", "_facts"),
    ("read: panels, fits in force (prepare's queries)", "panel_estimate.py", "current_layers_many"),
    ("read: panels, fits in force (prepare's queries)", "intake.py", "_in_force"),
    ("checks (checks.problems)", "checks.py", "problems"),
    ("fit (mirror + fit_many)", "intake.py", "_to_panel_frame"),
    ("fit (mirror + fit_many)", "intake.py", "_fit"),
    ("history (product_history)", "history.py", "product_history"),
    ("estimate: stack, risk (panel_estimate.compute less forecast)", "panel_estimate.py",
     "compute"),
    ("forecast (forecast_final)", "forecast.py", "forecast_final"),
    ("write transaction (intake.write less answer)", "intake.py", "write"),
    ("answer (panel state read, MeasurementRead)", "measurements.py", "answer"),
)


def where_time_goes(url: str, key: str, work: dict[str, Any], n: int, top: int = 0
                    ) -> dict[str, Any]:
    """Sequential POSTs through TestClient (accept wrapped), then accept itself under cProfile."""
    import warnings

    warnings.filterwarnings("ignore", message=".*httpx.*starlette.testclient.*")
    from fastapi.testclient import TestClient

    from app.main import create_app
    from app.schemas.measurements import MeasurementCreate
    from app.services import measurements

    bodies = [b for step in range(max(len(p) for p in work["posts"]))
              for p in work["posts"] if step < len(p) for b in [p[step]]]
    first, second = bodies[:n], bodies[n:2 * n]
    db = Database(url)
    timer = _data.Timer()
    statements = [0]

    def count(*_: Any) -> None:
        statements[0] += 1

    # Statements through SQLAlchemy; the bulk inserts go to the driver's cursor directly (COPY
    # or executemany, 3 a post) and are not counted.
    event.listen(db.engine, "before_cursor_execute", count)
    try:
        client = TestClient(create_app(db))
        headers = {"Authorization": f"Bearer {key}", "Content-Type": "application/json"}
        timer.wrap(measurements, "accept")
        per_post = []
        for body in first:
            t = time.perf_counter()
            r = client.post("/api/v1/measurements", content=body, headers=headers)
            per_post.append(time.perf_counter() - t)
            assert r.status_code == 201, r.text
        timer.restore()
        per_post_statements = statements[0] / len(first)
        statements[0] = 0
        principal = keys.authenticate(db=db, authorization=f"Bearer {key}")
        parse_s = 0.0
        profiler = cProfile.Profile()
        for body in second:
            t = time.perf_counter()
            data = MeasurementCreate.model_validate_json(body)
            parse_s += time.perf_counter() - t
            profiler.enable()
            measurements.accept(db=db, data=data, principal=principal, body=body)
            profiler.disable()
        per_accept_statements = statements[0] / len(second)
    finally:
        event.remove(db.engine, "before_cursor_execute", count)
        db.close()
    listing = io.StringIO()
    pstats.Stats(profiler, stream=listing).sort_stats("cumulative").print_stats(
        r"/app/", top)
    stats = pstats.Stats(profiler).stats  # type: ignore[attr-defined]
    cum: dict[tuple[str, str], float] = {}
    for (path, _line, name), (_cc, _nc, _tt, ct, _callers) in stats.items():
        key_ = (Path(path).name, name)
        cum[key_] = cum.get(key_, 0.0) + ct
    accept_s = cum.get(("measurements.py", "accept"), 0.0)
    groups: dict[str, float] = {}
    for label, file, name in GROUPS:
        groups[label] = groups.get(label, 0.0) + cum.get((file, name), 0.0)
    forecast = "forecast (forecast_final)"
    groups["estimate: stack, risk (panel_estimate.compute less forecast)"] -= groups[forecast]
    groups["write transaction (intake.write less answer)"] -= \
        groups["answer (panel state read, MeasurementRead)"]
    groups["rest of accept (digest, batch form, plan)"] = accept_s - sum(groups.values())
    return {"posts": len(per_post), "post_ms": 1e3 * statistics.mean(per_post),
            "accept_ms": 1e3 * timer.seconds.get("accept", 0.0) / len(per_post),
            "parse_ms": 1e3 * parse_s / len(second), "profiled": len(second),
            "profiled_accept_ms": 1e3 * accept_s / len(second),
            "groups": {k: 1e3 * v / len(second) for k, v in groups.items()},
            "listing": listing.getvalue() if top else "",
            "statements_post": per_post_statements, "statements_accept": per_accept_statements}
