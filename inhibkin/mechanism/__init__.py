"""mechanism."""
