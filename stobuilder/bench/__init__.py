"""stobuilder.bench.run."""
