"""Tables, figures and the static HTML report of a campaign."""
