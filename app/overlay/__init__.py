"""Pure numeric core of stackledger: overlay fit, side-B mirror, stack accumulation,
exceedance probability, forecast and resistance.

This package imports numpy and scipy only. It knows nothing of databases, HTTP or pandas;
everything else in the application calls it and it calls nothing else.
"""
