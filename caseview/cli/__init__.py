"""Command-line interface. ``main.py`` builds the parser; each module registers its commands."""
