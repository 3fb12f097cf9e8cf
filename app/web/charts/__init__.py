"""Plotly figures built on the server; a template hands their JSON to the locally served plotly.js."""
