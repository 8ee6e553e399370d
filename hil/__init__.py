"""Bench side of kinetab (DESIGN §8): serial framing, messages, sessions and parameter fits.

Not built yet: this package exists so the wheel layout is final; see DEVELOPERS.md for the plan.
"""
