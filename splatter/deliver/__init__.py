"""Stage 5, delivery: display encoding, PNG/EXR writers, sprite sheets, previews, packing, the output sink."""
