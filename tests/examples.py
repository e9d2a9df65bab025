"""Small hand-checked problems shared by several test files."""

#: Hard sinks X and Y need 6 + 4 = 10. Only A (supply 5, unbounded arcs to X and Y) and the
#: arc B -> X (capacity 2) reach them: 7 at most, so 3 short. Z is served by B alone.
#: Worked by hand (max-flow min-cut), common practice, no source.
SHORT = {
    "sources": [{"id": "A", "supply": 5}, {"id": "B", "supply": 10}],
    "sinks": [{"id": "X", "demand": 6}, {"id": "Y", "demand": 4}, {"id": "Z", "demand": 3}],
    "arcs": [{"from": "A", "to": "X", "cost": 1}, {"from": "A", "to": "Y", "cost": 2},
             {"from": "B", "to": "X", "cost": 3, "capacity": 2},
             {"from": "B", "to": "Z", "cost": 1}],
}
