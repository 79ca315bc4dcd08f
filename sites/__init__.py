"""Bundled site files (TOML); installed as package data of planner._sites."""
