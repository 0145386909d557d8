import { describe, expect, it } from 'vitest';
import { baselineAt, correctedLoadFraction, defaultBaselineOptions, fitBinnedBaseline } from '../../services/core/index.ts';
import { referenceText } from '../helpers/reference.ts';

// Source: UCI Machine Learning Repository, "Gas Turbine CO and NOx Emission Data Set" (Kaya, Tüfekci,
// Uzun, Turkish J. of Electrical Engineering & Computer Sciences 27 (2019) 4783–4796), CC BY 4.0.
// Hourly rows in time order: the data set's five yearly files (gt_2011.csv … gt_2015.csv) one
// after the other; the rows carry no date. Rows per year: 2011 7411, 2012 7628, 2013 7152, 2014
// 7158, 2015 7384 (counted in a public copy of the yearly files). The first tests check that
// split against this file: the counts add up to its rows, the first and last row of each yearly
// file sit where the counts put them, and each year so cut is a year by its own weather.
const ROWS_PER_YEAR = [7411, 7628, 7152, 7158, 7384];
// First and last row of each yearly file (AT, AP, AH, AFDP, GTEP, TIT, TAT, TEY, CDP, CO, NOX),
// copied from the yearly files themselves.
const YEAR_ENDS: Record<number, [string, string]> = {
  2011: ['4.5878,1018.7,83.675,3.5758,23.979,1086.2,549.83,134.67,11.898,0.32663,81.952', '6.9279,1007.2,97.533,3.4275,19.306,1049.9,545.85,111.58,10.583,4.9816,92.498'],
  2012: ['6.8594,1007.9,96.799,3.5,19.663,1059.2,550,114.7,10.605,3.1547,82.722', '10.059,1021.8,88.012,2.4579,19.526,1047.5,542.91,111.24,10.585,8.0107,86.066'],
  2013: ['9.3779,1020.1,90.262,2.3927,19.166,1043.6,541.16,110.16,10.564,9.3472,98.741', '4.2148,1029.4,70.679,4.2049,33.768,1100,530.97,167.3,14.291,1.1337,78.95'],
  2014: ['8.8358,1022.2,98.762,3.2422,23.152,1067.5,549.94,126.16,11.381,1.9157,68.292', '3.3834,1019.7,81.884,2.7124,21.328,1057.8,546.35,121.25,11.18,9.927,91.144'],
  2015: ['1.9532,1020.1,84.985,2.5304,20.116,1048.7,544.92,116.27,10.799,7.4491,113.25', '6.0392,1028.8,94.547,3.8752,22.524,1067.9,548.23,125.41,11.462,11.981,109.24'],
};
const TRAIN_ROWS = ROWS_PER_YEAR[0] + ROWS_PER_YEAR[1] + ROWS_PER_YEAR[2];
// Normalisation only (the data set gives no rating): a little above the largest hourly yield, MW.
const RATED_MW = 180;

interface Score {
  rmseDegC: number;
  maeDegC: number;
  covered: number;
  noBaseline: number;
}

async function load() {
  const lines = referenceText('uci-gas-turbine-co-nox-2011-2015.csv').trim().split(/\r?\n/);
  const h = lines[0].split(',');
  const col = (name: string) => h.indexOf(name);
  const rows = lines.slice(1).map((l) => l.split(',').map(Number));
  return { rows, AT: col('AT'), AP: col('AP'), TAT: col('TAT'), TEY: col('TEY') };
}

function score(loads: number[], tat: number[], binWidth: number): Score {
  const options = { ...defaultBaselineOptions, binWidth };
  const b = fitBinnedBaseline(loads.slice(0, TRAIN_ROWS), tat.slice(0, TRAIN_ROWS), options);
  let n = 0;
  let se = 0;
  let ae = 0;
  let none = 0;
  for (let i = TRAIN_ROWS; i < loads.length; i++) {
    const v = baselineAt(b, loads[i]);
    if (!v) {
      none++;
      continue;
    }
    const e = tat[i] - v.median;
    n++;
    se += e * e;
    ae += Math.abs(e);
  }
  return { rmseDegC: Math.sqrt(se / n), maeDegC: ae / n, covered: n, noBaseline: none };
}

/** Means of `xs` over every window of `w` consecutive values, stepping by `step`, with where each starts. */
function windowMeans(xs: number[], w: number, step: number): { at: number; mean: number }[] {
  const out: { at: number; mean: number }[] = [];
  for (let i = 0; i + w <= xs.length; i += step) {
    let sum = 0;
    for (let j = i; j < i + w; j++) sum += xs[j];
    out.push({ at: i, mean: sum / w });
  }
  return out;
}

describe('the UCI file split into its years', () => {
  it('by the counts per year: each yearly file’s first and last rows are where the counts put them', async () => {
    const { rows } = await load();
    const num = (line: string) => line.split(',').map(Number);
    let start = 0;
    for (const [y, n] of ROWS_PER_YEAR.entries()) {
      const [firstRow, lastRow] = YEAR_ENDS[2011 + y];
      expect(rows[start], `first row of ${2011 + y}`).toEqual(num(firstRow));
      expect(rows[start + n - 1], `last row of ${2011 + y}`).toEqual(num(lastRow));
      start += n;
    }
  });

  it('by the counts per year: they add up to the file, and each year so cut has its summer in the middle and its winter at its ends', async () => {
    const { rows, AT } = await load();
    expect(rows.length).toBe(ROWS_PER_YEAR.reduce((a, b) => a + b, 0));
    const at = rows.map((r) => r[AT]);
    // The file has no dates, so the year boundaries are checked by the season (the plant's
    // ambient air, a site with hot summers and mild winters, about 27 °C against 8–10 °C as
    // monthly means): in each year the warmest 30 days (720 hourly rows) fall 40–70 % of the way
    // through its rows, and the coldest within the first or last 12 % (a coarse check: a year
    // cut a season wrong fails it).
    let start = 0;
    for (const [y, n] of ROWS_PER_YEAR.entries()) {
      const year = 2011 + y;
      const means = windowMeans(at.slice(start, start + n), 720, 24);
      const warm = means.reduce((a, b) => (b.mean > a.mean ? b : a));
      const cold = means.reduce((a, b) => (b.mean < a.mean ? b : a));
      const warmAt = (warm.at + 360) / n, coldAt = (cold.at + 360) / n;
      expect(warmAt, `${year}: warmest 30 days ${warm.mean.toFixed(1)} °C`).toBeGreaterThan(0.4);
      expect(warmAt, `${year}: warmest 30 days ${warm.mean.toFixed(1)} °C`).toBeLessThan(0.7);
      expect(Math.min(coldAt, 1 - coldAt), `${year}: coldest 30 days ${cold.mean.toFixed(1)} °C at ${coldAt.toFixed(2)}`).toBeLessThan(0.12);
      expect(warm.mean - cold.mean, `${year}`).toBeGreaterThan(12);
      start += n;
    }
  });
});

describe('ring-mean baseline against corrected load on a real gas turbine (UCI data set)', () => {
  it('fitted on 2011–2013, predicts the 2014–2015 exhaust temperature (TAT) better on corrected than on uncorrected load', async () => {
    const { rows, AT, AP, TAT, TEY } = await load();
    const tat = rows.map((r) => r[TAT]);
    const corrected = rows.map((r) => correctedLoadFraction(r[TEY], r[AT], r[AP] / 10, { ratedPowerMw: RATED_MW }));
    const raw = rows.map((r) => r[TEY] / RATED_MW);
    const figures: Record<string, Score> = {};
    for (const bw of [0.05, 0.02]) {
      figures[`corrected, ${bw * 100} % bins`] = score(corrected, tat, bw);
      figures[`uncorrected, ${bw * 100} % bins`] = score(raw, tat, bw);
    }
    console.log('UCI TAT baseline, train 2011–2013, test 2014–2015 (°C):');
    for (const [k, s] of Object.entries(figures))
      console.log(`  ${k}: RMSE ${s.rmseDegC.toFixed(3)}, MAE ${s.maeDegC.toFixed(3)}, predicted ${s.covered}, no baseline ${s.noBaseline}`);
    const c = figures['corrected, 5 % bins'];
    const u = figures['uncorrected, 5 % bins'];
    // Measured with bins placed at their rings' median load: corrected RMSE 3.23 / MAE 1.83 °C;
    // uncorrected RMSE 3.33 / MAE 1.97 °C. (Placed at their centres they gave 3.03 / 1.59 and
    // 3.23 / 1.85: this machine's exhaust temperature is held flat near 550 °C up to about 78 %
    // corrected load and falls beyond it, and the 75–80 % bin's rings sit at 75–76 %, so the line
    // from its median load to the next bin's starts falling early. For a quantity that moves with
    // load through the bin, as at base load, the median load is where the bin's median belongs.)
    // Asserted with margin.
    expect(c.maeDegC).toBeLessThan(0.95 * u.maeDegC);
    expect(c.rmseDegC).toBeLessThan(u.rmseDegC);
    expect(c.rmseDegC).toBeLessThan(3.5);
    expect(c.maeDegC).toBeLessThan(2);
    // Thin bins say "no baseline" rather than extrapolate; almost every test hour is covered.
    expect(c.noBaseline).toBeGreaterThan(0);
    expect(c.covered / (c.covered + c.noBaseline)).toBeGreaterThan(0.99);
  });
});
