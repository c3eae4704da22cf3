"""Figures as the API takes and gives them.

Taken: coordinates are finite JSON numbers (``true`` is not 1 and ``"1"`` is not a number), and
a point is a pair of them.

Given: figures are rounded at the edge, never in the core (the store keeps full precision).
Micrometres to 3 decimals (a nanometre, far below any overlay tool's repeatability, common
practice), ppm and urad to 3 decimals, probabilities to 4. ``-0.0`` reads as ``0.0``.
"""

from __future__ import annotations

from typing import Annotated, Final

from pydantic import Field, PlainSerializer

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
#: A point given back, (x, y) in mm, to 6 decimals (a nanometre).
PointOut = Annotated[tuple[Annotated[float, _rounder(6)], Annotated[float, _rounder(6)]],
                     Field(examples=[[-229.5, 231.75]])]
UmPair = Annotated[tuple[Um, Um], Field(examples=[[1.8, 2.1]])]
UmBand = Annotated[tuple[Um, Um], Field(examples=[[41.0, 77.5]])]
#: Highest layer reached per side.
LayersReached = Annotated[dict[str, int], Field(examples=[{"A": 6, "B": 5}])]
