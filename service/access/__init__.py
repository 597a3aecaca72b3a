"""Access: API keys, authentication and the analyst view's sign-in session."""
