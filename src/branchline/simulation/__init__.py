"""Confirmation by simulation: time integrations that show each located stability change."""
