"""Feature definition files and the plan compiled from them."""
