"""Load the demo scenario (sample_data/) into a fresh SQLite file through the services, the
same way a fab would: products, then panels, then the metrology CSV."""

from __future__ import annotations

import csv
import json
import os
import tempfile
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Final

from rich.console import Console
from sqlalchemy import select

from app.config import get_settings
from app.db import Database
from app.overlay.risk import severity
from app.reports import print_closest, print_holds
from app.schemas.panels import PanelCreate, PanelRead
from app.schemas.products import ProductCreate
from app.services import holds, imports, keys, panels, products
from app.store.migrate import upgrade
from app.store.tables import Product

SAMPLE_DATA = Path(__file__).resolve().parent / "sample_data"
DEMO_ROLES = ("uploader", "engineer", "supervisor", "admin")


def _days(path: Path, folder: Path) -> list[Path]:
    """The metrology file split by the UTC day of its measurements, in time order."""
    by_day: dict[str, list[list[str]]] = {}
    with path.open(encoding="utf-8", newline="") as f:
        reader = csv.reader(f)
        header = next(reader)
        at = header.index("measured_at")
        for row in reader:
            day = datetime.fromisoformat(row[at]).astimezone(UTC).date().isoformat()
            by_day.setdefault(day, []).append(row)
    out = []
    for day in sorted(by_day):
        chunk = folder / f"measurements-{day}.csv"
        with chunk.open("w", encoding="utf-8", newline="") as f:
            writer = csv.writer(f, lineterminator="\n")
            writer.writerow(header)
            writer.writerows(by_day[day])
        out.append(chunk)
    return out


def load_into(db: Database, *,
              load: Callable[[Database, Path], None] | None = None) -> dict[str, str]:
    """Load sample_data/ into ``db`` (already migrated); returns a demo key per role.

    The metrology file is replayed a day at a time, as the line would have posted it, each day
    through the CSV import; the product history's cut-off moves with every day (the line took a
    month over what the demo does in seconds). ``load(db, path)`` imports one file (the CLI
    passes one with a progress bar)."""
    for item in json.loads((SAMPLE_DATA / "products.json").read_text(encoding="utf-8")):
        products.create(db=db, data=ProductCreate(**item), actor="demo")
    with (SAMPLE_DATA / "panels.csv").open(encoding="utf-8", newline="") as f:
        for row in csv.DictReader(f):
            panels.create(db=db, data=PanelCreate(**row), actor="demo")
    saved = os.environ.get(REFRESH)
    os.environ[REFRESH] = "0"
    get_settings.cache_clear()
    try:
        with tempfile.TemporaryDirectory(prefix="stackledger-demo-") as folder:
            for day in _days(SAMPLE_DATA / "measurements.csv", Path(folder)):
                if load is None:
                    imports.import_path(db=db, path=day, label="demo metrology")
                else:
                    load(db, day)
    finally:
        if saved is None:
            os.environ.pop(REFRESH, None)
        else:
            os.environ[REFRESH] = saved
        get_settings.cache_clear()
    return {role: keys.create(db=db, role=role, label=f"demo {role}")[0] for role in DEMO_ROLES}


REFRESH: Final = "STACKLEDGER_HISTORY_REFRESH_S"


#: How the demo's first table is ordered, said under it.
CLOSEST_ORDER: Final = (
    "Order: risk level first (over_limit, at_risk, watch, clear), so no panel already over a "
    "limit is left out; within a level, the larger of current FTB / FTB limit and "
    "P(final over limit)."
)


def closest_to_limit(db: Database, n: int = 15) -> list[tuple[PanelRead, float]]:
    """The ``n`` panels nearest their limits, in the order of ``CLOSEST_ORDER``: a panel over
    its L2L or resistance limit can have a small FTB and P(final over limit), yet it comes first."""
    with db.transaction() as session:
        limits = {p.code: p.ftb_limit_um for p in session.scalars(select(Product))}
    page = panels.list_panels(db=db, limit=500)
    items = list(page.items)
    while page.next_cursor:
        page = panels.list_panels(db=db, limit=500, cursor=page.next_cursor)
        items += page.items

    def closeness(p: PanelRead) -> float:
        """The larger of the share of the limit used now and P(final over limit)."""
        ratio = p.ftb_current_um / limits[p.product]
        return max(ratio, p.forecast.p_final_over_limit if p.forecast else 0.0)

    items.sort(key=lambda p: (severity(p.risk), closeness(p)), reverse=True)
    return [(p, limits[p.product]) for p in items[:n]]


def load_demo(path: Path, *, console: Console,
              load: Callable[[Database, Path], None] | None = None) -> str:
    """Create ``path`` afresh, load the scenario, print the report; returns the database URL."""
    for suffix in ("", "-wal", "-shm"):
        Path(str(path) + suffix).unlink(missing_ok=True)
    url = f"sqlite:///{path.resolve()}"
    db = Database(url)
    try:
        upgrade(db.engine)
        demo_keys = load_into(db, load=load)
        print_closest(console, closest_to_limit(db), "Panels nearest their limits")
        console.print(CLOSEST_ORDER)
        print_holds(console, holds.list_all_holds(db=db, state="open"))
        console.print("\nDemo keys (use as 'Authorization: Bearer <key>'):")
        for role, key in demo_keys.items():
            console.print(f"  {role:<10} {key}")
    finally:
        db.close()
    return url
