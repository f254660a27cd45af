"""What to tell the technician: ranking, diagnosis figures, repair order and the policy. Pure."""
