"""Bundled forecast data: line list, telluric bands, abundance table."""
