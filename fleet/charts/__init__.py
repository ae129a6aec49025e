"""Every plotly figure of the dashboard, built from plain data; pages load plotly's JavaScript themselves."""
