"""Files in and out: CSV import whole or not at all, export with canonical units, the upload page."""
