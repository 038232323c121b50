"""Column roles, the data checks and the prepared frame, dates, filters, episodes."""
