"""Ride data in and out of other programs' formats: CSV import and export."""
