/**
 * The registry of models: a serialisable spec in, a sampling kernel out. Worker threads receive
 * the spec (plain data and typed arrays) and build their kernel here, so every model kind runs
 * through the same driver.
 */
import type { Kernel } from '../sampler/kernel.js';
import { areaKernel, type AreaModelSpec } from './area.js';
import { countsKernel, type CountsModelSpec } from './counts.js';
import { unitKernel, type UnitModelSpec } from './unit.js';

export type ModelSpec =
  | ({ kind: 'area' } & AreaModelSpec)
  | ({ kind: 'unit' } & UnitModelSpec)
  | ({ kind: 'counts' } & CountsModelSpec);

export function buildKernel(spec: ModelSpec): Kernel<unknown> {
  switch (spec.kind) {
    case 'area':
      return areaKernel(spec) as Kernel<unknown>;
    case 'unit':
      return unitKernel(spec) as Kernel<unknown>;
    case 'counts':
      return countsKernel(spec) as Kernel<unknown>;
  }
}
