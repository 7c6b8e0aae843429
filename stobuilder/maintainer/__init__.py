"""stobuilder.maintainer."""
