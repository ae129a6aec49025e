"""Each page's data function: plain JSON-ready data that the web (HTML, JSON, CSV) and the terminal both show."""
