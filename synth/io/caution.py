"""The caution that goes with every drive file the tool writes (to stderr and into the JSON reports).

References
----------
Common practice of random-vibration testing, no source: a drive file is
played open-loop only through a closed-loop controller with abort limits.
"""

from __future__ import annotations

#: Printed (to stderr) and recorded (report.json) whenever a drive file is written.
DRIVE_CAUTION = (
    "CAUTION: a drive file is open-loop. Play it only through a closed-loop vibration controller "
    "with its own alarm and abort limits; check the shaker's stroke, velocity and force limits "
    "against the figures above; follow your lab's procedures, local codes and licensed practice."
)

__all__ = ["DRIVE_CAUTION"]
