"""Terminal reports (rich): one panel, the panels closest to their limit, the hold list, the
audit trail and the refused uploads."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from app.schemas.holds import CAUTION, HoldList
from app.schemas.panels import PanelRead
from app.schemas.records import AuditPage, RejectedUploadPage
from app.views.text import missing, reached

RISK_STYLE = {"clear": "green", "watch": "yellow", "at_risk": "bold red",
              "over_limit": "bold white on red"}



def _p(value: float | None) -> str:
    return "-" if value is None else f"{value:.2f}"


def print_panel(console: Console, p: PanelRead) -> None:
    console.print(f"[bold]{p.serial}[/bold]  product {p.product}  lot {p.lot}  "
                  f"status {p.status}  risk [{RISK_STYLE[p.risk]}]{p.risk}[/] "
                  f"(rule {p.risk_rule})")
    gaps = missing(p.missing_layers)
    console.print(f"layers reached {reached(p.layers_reached)}"
                  + (f"; missing {gaps}" if gaps else ""))
    x, y = p.ftb_current_at_mm
    console.print(f"current FTB {p.ftb_current_um:.1f} um at ({x:.1f}, {y:.1f}) mm; "
                  f"worst L2L {p.l2l_worst_um:.1f} um")
    if p.forecast:
        f = p.forecast
        lo, hi = f.ftb_final_band_um
        console.print(f"final FTB forecast {f.ftb_final_forecast_um:.1f} um (95 % band "
                      f"{lo:.1f}-{hi:.1f}); P(final over limit) {f.p_final_over_limit:.2f}")
    for r in p.reasons:
        console.print(f"  - {r}")


def print_closest(console: Console, panels: list[tuple[PanelRead, float]], title: str) -> None:
    table = Table(title=title)
    for col in ("panel", "lot", "product", "layers reached", "current FTB um", "limit um",
                "final FTB forecast um", "P(final over limit)", "risk"):
        table.add_column(col, justify="right" if "um" in col or "P(" in col else "left")
    for p, limit in panels:
        table.add_row(
            p.serial, p.lot, p.product,
            reached(p.layers_reached),
            f"{p.ftb_current_um:.1f}", f"{limit:.0f}",
            f"{p.forecast.ftb_final_forecast_um:.1f}" if p.forecast else "-",
            _p(p.forecast.p_final_over_limit if p.forecast else None),
            f"[{RISK_STYLE[p.risk]}]{p.risk}[/]",
        )
    console.print(table)


#: The terminal shows a hold id by its first characters; commands take them (``disposition``).
SHORT_ID = 8


def print_holds(console: Console, hold_list: HoldList, *, closed: bool = False) -> None:
    """The hold list: one table row per hold, worst first then oldest, then the reasons (and,
    for closed holds, the disposition notes)."""
    word = "Closed" if closed else "Open"
    table = Table(title=f"{word} holds: {len(hold_list.holds)} (worst first, then oldest)")
    columns = ["#", "hold id", "risk", "panel", "lot", "layers reached", "current FTB um"]
    # A closed hold shows its disposition in place of the forecast (which it no longer needs).
    columns += (["held since (UTC)", "held by", "disposition", "by", "when (UTC)"] if closed
                else ["final FTB forecast um (95 % band)", "P(final over limit)",
                      "held since (UTC)", "held by"])
    for col in columns:
        table.add_column(col, no_wrap=True)
    for i, h in enumerate(hold_list.holds, 1):
        band = h.ftb_final_band_um
        forecast = "-" if h.ftb_final_forecast_um is None else (
            f"{h.ftb_final_forecast_um:.1f}" + (f" ({band[0]:.0f}-{band[1]:.0f})" if band else ""))
        row = [
            str(i), h.id[:SHORT_ID], f"[{RISK_STYLE.get(h.risk, '')}]{h.risk}[/]", h.panel,
            h.lot, reached(h.layers_reached),
            f"{h.ftb_current_um:.1f}",
        ]
        held = [h.held_since.strftime("%Y-%m-%d %H:%M"), h.held_by]
        when = h.disposition_at.strftime("%Y-%m-%d %H:%M") if h.disposition_at else "-"
        row += [*held, h.disposition or "-", h.disposition_by or "-", when] if closed \
            else [forecast, _p(h.p_final_over_limit), *held]
        table.add_row(*row)
    console.print(table)
    for i, h in enumerate(hold_list.holds, 1):
        console.print(f"[bold]{i:>3}. {h.panel}[/bold] (hold {h.id}; {h.kind}, {h.rule}): "
                      f"{escape(h.reason)}", soft_wrap=True)
        if closed and h.disposition_note:
            console.print(f"     {h.disposition}: {escape(h.disposition_note)}", soft_wrap=True)
    console.print(f"\n[italic]{CAUTION}[/italic]")


def wide_console(stderr: bool = False) -> Console:
    """A console that does not squeeze tables to 80 columns when output goes to a file."""
    import sys

    stream = sys.stderr if stderr else sys.stdout
    return Console(stderr=stderr, width=None if stream.isatty() else 200)


def print_audit(console: Console, page: AuditPage) -> None:
    """The audit trail, newest first: who did what to which panel, with the figures."""
    table = Table(title=f"Audit trail: {len(page.items)} entries (newest first)")
    for col in ("#", "when (UTC)", "actor", "action", "subject", "details"):
        table.add_column(col, no_wrap=col != "details")
    for e in page.items:
        details = ", ".join(f"{k}={v}" for k, v in e.details.items()
                            if k in ("hold", "rule", "action", "reason", "note", "rework"))
        table.add_row(str(e.id), e.at.strftime("%Y-%m-%d %H:%M:%S"), escape(e.actor),
                      e.action, escape(e.subject), escape(details))
    console.print(table)


def print_rejections(console: Console, page: RejectedUploadPage) -> None:
    """Refused uploads, newest first, with the reason and where each problem is."""
    table = Table(title=f"Refused uploads: {len(page.items)} (newest first)")
    for col in ("#", "received (UTC)", "endpoint", "key", "status", "reason"):
        table.add_column(col, no_wrap=col != "reason")
    for r in page.items:
        where = "; ".join(
            f"{'line ' + str(e['line']) if e.get('line') else e.get('pointer', '')}"
            f"{', ' + e['column'] if e.get('column') else ''}: {e.get('message', '')}"
            for e in r.errors[:3])
        table.add_row(str(r.id), r.received_at.strftime("%Y-%m-%d %H:%M:%S"),
                      escape(r.endpoint), escape(r.key_label), str(r.status),
                      escape(r.reason + (f" ({where})" if where else "")))
    console.print(table)
