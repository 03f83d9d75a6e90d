"""Input and output shapes of the API. Inputs name what a client may set; outputs what it sees.

Owner, group, state and money fields only ever appear in output serializers.
"""
