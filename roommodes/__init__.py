"""roommodes: room modes and loudspeaker placement in small rectangular rooms."""
__version__ = "0.1.0"
