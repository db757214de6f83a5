"""HTML report and figures of a driftloop run."""
