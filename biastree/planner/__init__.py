"""Layer 7: plan a bias tree from a block list, and repair a failing tree, searching with check_tree."""
