"""What the review shows and keeps, without widgets: the session model (``model``, QtCore's
signals only), the one text formatter (``text``), the overview's numbers (``overview``), the
separation marks (``marks``) and the colours (``colours``) shared by the window and the sheet."""
