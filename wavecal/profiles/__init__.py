"""Example instrument profiles (TOML) for invented instruments."""
