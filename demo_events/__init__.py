"""Bundled demo events (invented scenarios); installed as package data of planner._demo_events."""
