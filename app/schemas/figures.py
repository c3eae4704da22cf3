"""Figures as the API takes and gives them.

Taken: coordinates are finite JSON numbers (``true`` is not 1 and ``"1"`` is not a number), and
a point is a pair of them.

Given: figures are rounded at the edge, never in the core (the store keeps full precision).
Micrometres to 3 decimals (a nanometre, far below any overlay tool's repeatability, common
practice), ppm and urad to 3 decimals, probabilities to 4. ``-0.0`` reads as ``0.0``.
"""

from __future__ import annotations

from typing import Annotated, Final

from pydantic import BaseModel, BeforeValidator, Field, PlainSerializer
from typing_extensions import TypedDict

UM_DECIMALS: Final = 3
RATIO_DECIMALS: Final = 3  # ppm and urad
P_DECIMALS: Final = 4


def _rounder(decimals: int) -> PlainSerializer:
    # Adding 0.0 turns -0.0 into 0.0.
    return PlainSerializer(lambda v: round(float(v), decimals) + 0.0, return_type=float)


Um = Annotated[float, _rounder(UM_DECIMALS)]
Ppm = Annotated[float, _rounder(RATIO_DECIMALS)]
Urad = Annotated[float, _rounder(RATIO_DECIMALS)]
Probability = Annotated[float, _rounder(P_DECIMALS)]

#: A finite JSON number, taken strictly.
Coordinate = Annotated[float, Field(strict=True, allow_inf_nan=False)]
#: A point on the panel, (x, y) in mm, panel frame.
PointIn = Annotated[tuple[Coordinate, Coordinate], Field(examples=[[-229.5, 231.75]])]


# Pairs are held as tuples in Python and given back as labelled objects, so that a reader of
# the JSON never has to guess which number is which.
class PointJson(TypedDict):
    x_mm: float
    y_mm: float


class PairJson(TypedDict):
    x_um: float
    y_um: float


class BandJson(TypedDict):
    low_um: float
    high_um: float


def _labelled(names: tuple[str, str], decimals: int, shape: type) -> PlainSerializer:
    def dump(v: tuple[float, float]) -> dict[str, float]:
        return {name: round(float(x), decimals) + 0.0 for name, x in zip(names, v, strict=True)}
    return PlainSerializer(dump, return_type=shape)


def _unlabelled(names: tuple[str, str]) -> BeforeValidator:
    # A stored answer (an idempotent replay) reads back in as the pair it was made from.
    def read(v: object) -> object:
        return tuple(v[n] for n in names) if isinstance(v, dict) else v
    return BeforeValidator(read)


#: A point given back as an [x, y] pair in mm, as products take it (check points), to 6
#: decimals (a nanometre).
PointPairOut = Annotated[tuple[Annotated[float, _rounder(6)], Annotated[float, _rounder(6)]],
                         Field(examples=[[-229.5, 231.75]])]
_POINT, _PAIR, _BAND = ("x_mm", "y_mm"), ("x_um", "y_um"), ("low_um", "high_um")
#: A point given back as {"x_mm", "y_mm"}, panel frame, to 6 decimals (a nanometre).
PointOut = Annotated[tuple[float, float], _unlabelled(_POINT),
                     _labelled(_POINT, 6, PointJson)]
#: An (x, y) pair of micrometres given back as {"x_um", "y_um"}.
UmPair = Annotated[tuple[float, float], _unlabelled(_PAIR),
                   _labelled(_PAIR, UM_DECIMALS, PairJson)]
#: A 95 % band given back as {"low_um", "high_um"}.
UmBand = Annotated[tuple[float, float], _unlabelled(_BAND),
                   _labelled(_BAND, UM_DECIMALS, BandJson)]


class LayersReached(BaseModel):
    """The highest layer measured on each side (0: none yet). The one shape of "layers
    reached" in the API, the CLI ("A 9 / B 8") and the pages."""

    A: int = Field(ge=0, examples=[9])
    B: int = Field(ge=0, examples=[8])
