"""Figures, one module per figure (matplotlib imported inside the drawing functions' modules only)."""
