"""Writes greenhouse.csv: invented hourly readings of a greenhouse (the series example).

Temperature follows the sun with a cloud factor per day and slow seasonal warming; humidity
falls as the air warms; soil moisture dries with the heat and jumps when the irrigation
runs (06:00 every third morning, or whenever the soil is too dry). Run once; deterministic.
"""

import csv
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np

HOURS = 1500
rng = np.random.default_rng(20240301)
start = datetime(2024, 3, 1)
cloud = rng.uniform(0.45, 1.1, size=HOURS // 24 + 1)
noise, soil = 0.0, 38.0
rows = []
for t in range(HOURS):
    day, hour = divmod(t, 24)
    noise = 0.8 * noise + rng.normal(0, 0.5)
    sun = np.sin(2 * np.pi * (hour - 9) / 24)
    temperature = 19 + 0.04 * day + 6.5 * cloud[day] * sun + noise
    irrigate = hour == 6 and (day % 3 == 0 or soil < 27)
    soil = min(soil + 11, 44.0) if irrigate else soil - 0.03 - 0.012 * max(temperature - 14, 0)
    humidity = 72 - 2.4 * (temperature - 19) + 6 * irrigate + rng.normal(0, 1.5)
    stamp = (start + timedelta(hours=t)).strftime("%Y-%m-%dT%H:%M")
    reading = soil + rng.normal(0, 0.25)
    rows.append((stamp, f"{temperature:.2f}", f"{np.clip(humidity, 30, 99):.1f}", f"{reading:.2f}"))

with open(Path(__file__).with_name("greenhouse.csv"), "w", newline="", encoding="utf-8") as out:
    writer = csv.writer(out)
    writer.writerow(("time", "temperature_c", "humidity_pct", "soil_moisture_pct"))
    writer.writerows(rows)
