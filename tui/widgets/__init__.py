"""Widgets of the bench UI: each shows one thing the operator reads at a glance."""
