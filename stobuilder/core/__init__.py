"""stobuilder.core."""
