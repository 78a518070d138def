"""Writers for the result files: one module per output kind.

``gis`` (GeoPackage, GeoJSON, GeoTIFF) and ``tables`` (summary.json, quantities.csv).
Each writer takes a :class:`wetmap.results.SurveyResult` and a path and writes one file.
"""
