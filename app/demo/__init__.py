"""Seeded demo scenario: a fictional substrate fab's panels, lots and overlay measurements.

``python -m app.demo.simulator`` regenerates ``app/demo/sample_data/``; see ``simulator.generate``.
"""
