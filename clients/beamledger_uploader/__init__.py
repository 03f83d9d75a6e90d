"""Beamledger uploader: sends new micrographs from an acquisition PC's folder to Beamledger.

Standard library plus `requests`. See clients/README.md.
"""

from __future__ import annotations

__version__ = "1.0"
