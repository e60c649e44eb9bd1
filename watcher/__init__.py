"""ionwarden: watch an instrument's export folder and judge the health of every MS run."""

__version__ = "0.1.0"
