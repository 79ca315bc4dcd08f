"""Bundled site files (TOML); installed as package data of kncast.planner._sites."""
