"""Harken's browser dashboard (Dash). The app factory arrives with the dashboard issue; nothing is built at import."""
