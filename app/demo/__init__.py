"""Seeded demo scenario: a fictional substrate fab's panels, lots and overlay measurements.

``python -m app.demo.simulator`` regenerates ``sample_data/``; see ``simulator.generate``.
"""
