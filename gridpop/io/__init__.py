"""Reading and writing files: raster alignment onto the grid (:mod:`.rasters`), vector layers
(:mod:`.vectors`) and the results of a run (:mod:`.results`)."""
