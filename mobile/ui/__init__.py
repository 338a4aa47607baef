"""The tablet app's screens (Kivy). Only this package imports Kivy; every screen calls the plain-Python
controllers in ``mobile.controllers`` and holds no domain logic of its own."""
