"""Demo and example presets shipped with Loopwright (TOML files; see README.md here)."""
