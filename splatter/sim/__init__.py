"""Stage 2, simulation: puffs born, moved by forces, bounced off obstacles, frame by frame."""
