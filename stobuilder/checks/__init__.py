"""stobuilder.checks.structure."""
