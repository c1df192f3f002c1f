"""Fulcrum's Streamlit pages, installed as the package explorer.app_pages (app.py is the entry script)."""
