"""Data access: the only package (with app.database) that talks to the database."""
