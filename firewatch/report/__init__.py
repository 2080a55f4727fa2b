"""The firing report: a firing record (``firewatch.firing.record``) laid out for the quality file.

``text`` holds the time language (durations with units, clock times in the
site's zone) and number formats; ``document`` turns a record into blocks of
text and tables; ``chart`` draws the firing with matplotlib; ``pdf`` and
``html`` lay the blocks out. Nothing here computes a figure of the firing:
the record has them all. matplotlib is imported by ``chart``, ``pdf`` and
``html`` (for its chart), which only ``firewatch report`` loads.
"""
