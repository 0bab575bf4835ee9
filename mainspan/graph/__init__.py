"""Graph: candidate links, Prim's tree and its certificate, arborescences, whole-cost and depth-aware layouts, tree walks."""
