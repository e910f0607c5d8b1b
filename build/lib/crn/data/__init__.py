"""Model files that ship with the package (the demo's droplet assay)."""
