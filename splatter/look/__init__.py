"""Stage 1, the look: TOML in, validated frozen records out."""
