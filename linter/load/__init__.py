"""Load: discover the files to check and read each into a located `Document`. Imports: common."""
