"""Choosing and reporting: analysis of stored runs, the recommendation (`pick`), figures,
reports and the round-off study."""
