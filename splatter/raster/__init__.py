"""Stage 4, raster: screen splats composited into premultiplied linear images, and image-space maps."""
