"""Reservoir lab: sample-efficient release planning for a small irrigation reservoir."""
