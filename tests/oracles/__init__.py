"""Independent single-part models the production economy model is tested against."""
