"""What arrives from outside, validated: OpenRTB-shaped objects, events, lookup requests, times."""
