"""Sites: reading point layers and putting them in a metric CRS."""
