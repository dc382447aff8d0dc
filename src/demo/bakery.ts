/**
 * The demo's scenario, invented and seeded: an industrial bakery's oven line. Seven sensors
 * per loaf predict bake quality: under, good or over. A second bakery runs the same recipe,
 * but its zone thermometers read about 9 °C high, its humidity probe reads in a different
 * range, and its belt runs a little faster — so a model trained at the first site misreads it.
 *
 * Nothing here is measured data; it exists to show the runtime end to end.
 */
import type { Rng } from '../model/layers/kind.js';

export const BAKERY_FEATURES = ['zone1_temp_c', 'zone2_temp_c', 'zone3_temp_c', 'humidity_pct', 'belt_speed_m_min', 'dough_mass_g', 'proof_time_min'] as const;

export const BAKERY_LABELS = ['under', 'good', 'over'] as const;

export interface BakerySite {
  readonly name: string;
  /** Added to every zone thermometer reading (sensor calibration). */
  readonly thermometerOffset: number;
  /** Humidity probe reading = true humidity * scale + shift. */
  readonly humidityScale: number;
  readonly humidityShift: number;
  /** Typical belt speed at this site. */
  readonly beltSpeed: number;
}

export const FIRST_SITE: BakerySite = { name: 'Northgate', thermometerOffset: 0, humidityScale: 1, humidityShift: 0, beltSpeed: 1.6 };
export const SECOND_SITE: BakerySite = { name: 'Riverside', thermometerOffset: 9, humidityScale: 0.8, humidityShift: 14, beltSpeed: 1.68 };

export interface BakeryBatch {
  readonly rows: number;
  /** rows x 7 raw sensor readings, row-major. */
  readonly x: Float32Array;
  /** Class index per row: 0 under, 1 good, 2 over. */
  readonly y: Int32Array;
}

/**
 * Draw `rows` loaves at a site. The true bake degree depends on the TRUE temperatures and
 * humidity; the site's sensors then report them with its own calibration.
 */
export function bakeLoaves(site: BakerySite, rows: number, rng: Rng): BakeryBatch {
  const x = new Float32Array(rows * BAKERY_FEATURES.length);
  const y = new Int32Array(rows);
  const normal = () => {
    // Box–Muller; 1 - u keeps the log argument in (0, 1].
    const u = 1 - rng.next();
    const v = rng.next();
    return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * v);
  };
  for (let r = 0; r < rows; r++) {
    const zone1 = 215 + 9 * normal();
    const zone2 = 230 + 9 * normal();
    const zone3 = 220 + 9 * normal();
    const humidity = 45 + 8 * normal();
    const belt = site.beltSpeed + 0.12 * normal();
    const mass = 800 + 45 * normal();
    const proof = 55 + 7 * normal();
    // Heat dose grows with temperature and time in the oven (slower belt), falls with mass and humidity.
    const heat = 0.5 * (zone1 - 215) + 0.8 * (zone2 - 230) + 0.6 * (zone3 - 220);
    const dwell = -8 * (belt - 1.6);
    const degree = heat / 9 + dwell - (mass - 800) / 60 - (humidity - 45) / 10 + (proof - 55) / 14 + 0.5 * normal();
    y[r] = degree < -1 ? 0 : degree > 1 ? 2 : 1;
    const o = r * BAKERY_FEATURES.length;
    x[o] = zone1 + site.thermometerOffset;
    x[o + 1] = zone2 + site.thermometerOffset;
    x[o + 2] = zone3 + site.thermometerOffset;
    x[o + 3] = humidity * site.humidityScale + site.humidityShift;
    x[o + 4] = belt;
    x[o + 5] = mass;
    x[o + 6] = proof;
  }
  return { rows, x, y };
}
