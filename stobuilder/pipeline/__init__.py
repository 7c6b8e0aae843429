"""stobuilder.pipeline.path."""
