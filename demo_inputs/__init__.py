"""The invented demo scenario (tables, boundaries, configuration), shipped as package data."""
