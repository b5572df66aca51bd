"""Products: timelines, episodes, screening, figures and the report."""
