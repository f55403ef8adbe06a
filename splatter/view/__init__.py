"""Stage 3, view: the camera, framing, lighting, and puffs projected to screen splats."""
