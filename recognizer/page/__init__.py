"""One page: finding the digit boxes and cutting and cleaning each box."""
