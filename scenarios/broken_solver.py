"""A small depth-first branch and bound of our own, with a realistic bug, for the demo.

It is written apart from prunetrail's engine (plain Python, standard library only) and prints
its search as JSON Lines (tracer/TRAIL_FORMAT.md), the way a user's own solver would:

    python scenarios/broken_solver.py scenarios/boiler_round.tsp > boiler_round_broken.jsonl

The bug: the running length of the open path grows by an edge when the search steps to a
child and shrinks by it when the search comes back, but the early `continue` taken for a
pruned child skips the shrink. Every later node then carries a path length too long by the
edges of all the children pruned before it, its bound is too high, and the search cuts
branches it should have explored. `--fixed` gives the edge back, and the same search then
proves the optimum. Reads TSPLIB files with EUC_2D coordinates only.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from typing import TextIO


def read_euc_2d(path: Path) -> tuple[str, list[tuple[float, float]]]:
    """The name and coordinates of a TSPLIB EUC_2D file (a deliberately small reader)."""
    name, points, in_coords = path.stem, [], False
    for raw in path.read_text().splitlines():
        line = raw.strip()
        if line.startswith("NAME"):
            name = line.split(":", 1)[1].strip()
        elif line.startswith("EDGE_WEIGHT_TYPE") and "EUC_2D" not in line:
            sys.exit(f"{path}: only EDGE_WEIGHT_TYPE EUC_2D is supported")
        elif line == "NODE_COORD_SECTION":
            in_coords = True
        elif line == "EOF":
            break
        elif in_coords and line:
            _, x, y = line.split()
            points.append((float(x), float(y)))
    return name, points


class Solver:
    """Depth-first search from city 0; bound = path + spanning tree + two cheapest links."""

    def __init__(self, points: list[tuple[float, float]], out: TextIO, fixed: bool) -> None:
        n = len(points)
        # TSPLIB's EUC_2D rule: Euclidean distance rounded to the nearest whole number.
        self.d = [[int(math.dist(p, q) + 0.5) for q in points] for p in points]
        self.n, self.out, self.fixed = n, out, fixed
        self.path = [0]
        self.unvisited = set(range(1, n))
        self.length = 0
        self.next_id = 0
        self.best_tour = self.nearest_neighbour()
        self.best = self.tour_length(self.best_tour)

    def nearest_neighbour(self) -> list[int]:
        tour, left = [0], set(range(1, self.n))
        while left:
            here = tour[-1]
            tour.append(min(left, key=lambda c: (self.d[here][c], c)))
            left.remove(tour[-1])
        return tour

    def tour_length(self, tour: list[int]) -> int:
        return sum(self.d[a][b] for a, b in zip(tour, tour[1:] + tour[:1], strict=True))

    def spanning_tree(self, cities: set[int]) -> int:
        """Prim's algorithm over the given cities."""
        left = sorted(cities)
        key = {c: self.d[left[0]][c] for c in left[1:]}
        total = 0
        while key:
            city = min(key, key=lambda c: (key[c], c))
            total += key.pop(city)
            for other in key:
                key[other] = min(key[other], self.d[city][other])
        return total

    def emit(self, record: dict[str, object]) -> None:
        self.out.write(json.dumps(record) + "\n")

    def visit(self, parent: int | None) -> tuple[int, str]:
        """Record the node at the end of `self.path`; its id and decision."""
        ident, self.next_id = self.next_id, self.next_id + 1
        last = self.path[-1]
        node: dict[str, object] = {
            "kind": "node",
            "id": ident,
            "parent": parent,
            "city": last,
            "partial": self.length,
        }
        if not self.unvisited:
            tour = self.length + self.d[last][0]
            decision = "tour_better" if tour < self.best else "tour"
            node.update(decision=decision, length=tour)
            self.emit(node)
            if decision == "tour_better":
                self.best, self.best_tour = tour, list(self.path)
                self.emit({"kind": "best", "id": ident, "length": tour, "tour": self.best_tour})
            return ident, decision
        link_in = min(self.unvisited, key=lambda c: (self.d[last][c], c))
        link_out = min(self.unvisited, key=lambda c: (self.d[c][0], c))
        tree = self.spanning_tree(self.unvisited)
        bound = self.length + tree + self.d[last][link_in] + self.d[link_out][0]
        decision = "prune" if bound >= self.best else "expand"
        node.update(
            tree=tree,
            link_in=[link_in, self.d[last][link_in]],
            link_out=[link_out, self.d[link_out][0]],
            decision=decision,
        )
        self.emit(node)
        return ident, decision

    def search(self, parent: int) -> None:
        """Visit every child of the current path, nearest first, and recurse below them."""
        last = self.path[-1]
        for city in sorted(self.unvisited, key=lambda c: (self.d[last][c], c)):
            self.path.append(city)
            self.unvisited.remove(city)
            self.length += self.d[last][city]
            ident, decision = self.visit(parent)
            if decision == "prune":
                self.path.pop()
                self.unvisited.add(city)
                if self.fixed:
                    self.length -= self.d[last][city]
                continue  # the bug: without --fixed the edge to `city` is never given back
            if decision == "expand":
                self.search(ident)
            self.path.pop()
            self.unvisited.add(city)
            self.length -= self.d[last][city]

    def run(self, name: str, points: list[tuple[float, float]]) -> None:
        self.emit(
            {
                "kind": "header",
                "instance": {"name": name, "coords": [list(p) for p in points], "metric": "EUC_2D"},
                "solver": {"bound": "tree+links", "cutoff": 0, "start": "nearest neighbour"},
            }
        )
        self.emit({"kind": "best", "id": None, "length": self.best, "tour": self.best_tour})
        root, decision = self.visit(None)
        if decision == "expand":
            self.search(root)
        self.emit({"kind": "end", "status": "complete"})


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n", 1)[0])
    parser.add_argument("instance", type=Path, help="TSPLIB file with EUC_2D coordinates")
    parser.add_argument("--fixed", action="store_true", help="give the edge back (no bug)")
    args = parser.parse_args()
    name, points = read_euc_2d(args.instance)
    solver = Solver(points, sys.stdout, args.fixed)
    solver.run(name, points)
    print(f"tour {solver.best_tour} length {solver.best}", file=sys.stderr)


if __name__ == "__main__":
    main()
