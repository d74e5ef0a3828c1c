"""The .xlsx container, knowing nothing of networks: cell addresses and A1 text, package safety,
worksheet scanning and the reader, shared by book, engines and checks."""
