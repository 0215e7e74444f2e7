"""The streamtab touch app: Kivy screens over a kivy-free controller (mobile.app.controller)."""
