"""Scans: files and folders to pages (PNG, JPEG, BMP, TIFF, PDF), each page a grey image."""
