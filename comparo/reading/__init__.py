"""Reading: dataset folders, curators' spreadsheets, the entry template and Newick text, to raw
tables. Knows file formats, not rules."""
