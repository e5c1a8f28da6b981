"""Command-line verbs that open the window (``open``, and ``demo`` when a screen is available)."""
