"""The choices an analysis page is asked for: the product (default: the first by code), a side,
a layer, a term. Each is checked here and refused with a 4xx that names the query field."""

from __future__ import annotations

from app.db import Database
from app.errors import FieldError, InvalidInput, NotFound
from app.overlay.model import TERM_NAMES
from app.services import products


def product_choice(db: Database, asked: str) -> tuple[list[str], str | None]:
    """Every product's code, and the one chosen: asked for, else the first (None: none yet)."""
    codes = [p.code for p in products.list_products(db=db).items]
    asked = asked.strip()
    if asked and asked not in codes:
        raise NotFound(f"unknown product '{asked}'",
                       [FieldError("unknown product", pointer="query:/product")])
    return codes, asked or (codes[0] if codes else None)


def side_choice(asked: str) -> str:
    if asked not in ("A", "B"):
        raise InvalidInput(f"side must be A or B, got '{asked}'",
                           [FieldError("not a side", pointer="query:/side")])
    return asked


def layer_choice(asked: str, layers_per_side: int) -> int | None:
    """A layer number of the product, or None (all layers) when not asked for."""
    asked = asked.strip()
    if not asked:
        return None
    # isdecimal, not isdigit: '²' is a digit that int() refuses.
    if not asked.isdecimal() or not 1 <= int(asked) <= layers_per_side:
        raise InvalidInput(f"layer must be a number from 1 to {layers_per_side}, got '{asked}'",
                           [FieldError("not a layer of the product", pointer="query:/layer")])
    return int(asked)


def term_choice(asked: str) -> str | None:
    if not asked:
        return None
    if asked not in TERM_NAMES:
        raise InvalidInput(f"term must be one of {', '.join(TERM_NAMES)}, got '{asked}'",
                           [FieldError("not a term", pointer="query:/term")])
    return asked
