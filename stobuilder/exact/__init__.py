"""stobuilder.exact."""
