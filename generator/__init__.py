"""kinetab: vehicle dynamics -> fixed-point feed-forward tables and C for drive controllers."""

__version__ = "0.1.0"
