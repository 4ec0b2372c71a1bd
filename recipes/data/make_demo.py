"""Write the invented demo data set (seeded) to recipes/data/deliveries.csv."""
from pathlib import Path

from learnopt.demo import make_data

if __name__ == "__main__":
    out = Path(__file__).with_name("deliveries.csv")
    tmp = out.with_suffix(".csv.tmp")
    make_data().to_csv(tmp, index=False)
    tmp.replace(out)  # atomic: never a half-written file
    print(f"wrote {out}")
