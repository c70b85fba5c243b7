"""report stage of the conecheck pipeline."""
