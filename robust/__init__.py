"""Robust-design assistant for the balance controllers of two-wheeled balancing vehicles."""

__version__ = "0.1.0"
