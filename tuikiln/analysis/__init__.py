"""Analysis of runs and traces: tempering parameter, quench timing, imported CSV logs.

Pure domain core: numpy only, no Textual, no serial port, no clock reads.
"""

from __future__ import annotations
