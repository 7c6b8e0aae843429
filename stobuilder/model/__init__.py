"""stobuilder.model."""
