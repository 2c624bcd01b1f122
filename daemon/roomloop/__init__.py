"""roomloop: an anticipating on/off zone controller for heating retrofits."""

__version__ = "0.1.0"
