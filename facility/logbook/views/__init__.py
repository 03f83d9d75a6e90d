"""Pages of the logbook, and the pages that read across bookings and the logbook.

home: the overview by role; instruments: list and week page; station: check in / out at the
microscope; session: the session page and its forms.
"""
