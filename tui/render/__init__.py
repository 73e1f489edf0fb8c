"""Pure renderers for the station: arrays in, rich Text lines out (no Textual here)."""
