"""Files in and out: room files (TOML), WAV files, measurement text files, atomic writes."""
