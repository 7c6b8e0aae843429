"""stobuilder.builder."""
