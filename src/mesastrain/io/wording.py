"""Wording shared by the output folder, the report and the command line."""

__all__ = ["CAUTION"]

#: The caution every result carries (``summary.json`` ``caution``, the report's last box,
#: the end of ``mesastrain run`` and of a sweep).
CAUTION = ("Linear-elastic estimates from tabulated material constants: confirm them by "
           "measurement (Raman spectroscopy, X-ray diffraction, wafer curvature) and by "
           "qualification of the real devices. They defer to your own qualification "
           "procedures, and to the judgement of a licensed professional wherever a failure "
           "could hurt someone.")
