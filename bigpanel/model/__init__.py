"""The model a user asks for: the formula language and the checked spec."""
