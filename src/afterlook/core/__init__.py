"""Pure numerics of afterlook: numpy and scipy only, no files, no UI."""
