"""Assessments built on measured levels: occupational noise exposure and dose."""
