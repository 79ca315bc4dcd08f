"""Bundled demo events (invented scenarios); installed as package data of kncast.planner._demo_events."""
