"""PDF drawing with reportlab: the service sheet, the due list and the parts
list.  ``base`` holds the fonts, styles and the page furniture they share."""
