"""The body-fitted re-analysis of an exported outline: what you export is what was checked."""
