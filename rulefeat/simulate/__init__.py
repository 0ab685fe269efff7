"""The fictional "Zorbleth" platform: simulated tutoring logs with known truth.

``generate`` holds :func:`tutor_logs` and its results; ``plan`` draws the students, schools and
behaviours, ``steps`` the actions, ``clock`` the times, ``labels`` the coded windows and outcomes, and
``frames`` turns them into the events and labels tables.
"""

from .generate import BEHAVIOURS, DEFAULT_LABEL_LINKS, SimulatedTutorData, SimulationTruth, tutor_logs

__all__ = ["BEHAVIOURS", "DEFAULT_LABEL_LINKS", "SimulatedTutorData", "SimulationTruth", "tutor_logs"]
