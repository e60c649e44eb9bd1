"""ionwarden: watch an instrument's export folder and judge the health of every mass-spectrometry run."""

__version__ = "0.1.0"
