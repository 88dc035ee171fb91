"""Wording shared by the output folder, the report and the command line."""

__all__ = ["CAUTION"]

#: The caution every result carries (``summary.json`` ``caution``, the report's last box,
#: the end of ``mesastrain run`` and of a sweep).
CAUTION = ("Linear-elastic estimates: they do not replace measurement, qualification, "
           "local codes or the judgement of a licensed professional.")
