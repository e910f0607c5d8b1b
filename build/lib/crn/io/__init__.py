"""Reading and writing files: model files, exports and imports."""
