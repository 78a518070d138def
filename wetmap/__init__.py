"""wetmap: wet roof insulation and wet hull core mapped from thermal imagery.

The library never prints and never imports the command-line framework. Start from
:func:`wetmap.pipeline.run_survey` or the stage modules (``radiometry``, ``detect``,
``polygons``, ``verdicts``, ``quantities``; docs/ARCHITECTURE.md draws them all).

An infrared survey shows apparent thermal anomalies, not measured moisture: invasive
verification (cores) is required before any repair decision.
"""

__version__ = "0.1.0"
