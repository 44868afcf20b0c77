"""Reading and checking BIDS-organised EEG datasets."""
