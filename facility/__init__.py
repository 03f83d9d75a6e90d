"""Beamledger: the session logbook and instrument-usage database of an EM core facility."""

from facility.celery import app as celery_app

__all__ = ["celery_app"]
