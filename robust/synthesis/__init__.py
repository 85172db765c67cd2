"""Gain synthesis: nominal methods (pole placement, LQR) and LMI synthesis over the box."""
