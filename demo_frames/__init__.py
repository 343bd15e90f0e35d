"""Small synthetic demo arc frames from an invented instrument."""
