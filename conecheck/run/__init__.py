"""run stage of the conecheck pipeline."""
