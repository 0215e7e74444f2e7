"""streamtab shells: the Kivy touch app and the desk command line."""
