"""The briefing: tables (CSV, GeoPackage), the report (HTML, Markdown), slides and the manifest.

Modules are imported where used; this package's import is light.
"""
