"""Pure numeric core of stackledger: overlay fit (with its guard), side-B mirror, stack
accumulation, exceedance probability, forecast, via capture, risk and resistance.

This package imports numpy and scipy only. It knows nothing of databases, HTTP or pandas;
everything else in the application calls it and it calls nothing else.
"""
