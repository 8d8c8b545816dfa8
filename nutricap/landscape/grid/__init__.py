"""The raster path: grid checks, the streamed window passes and the grid outputs."""
