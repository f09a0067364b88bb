/** Loads a model kind's data and prepares it for the shared sampler, summaries and writer. */
import type { Settings } from '../config/types.js';
import { loadAreaData } from '../data/area.js';
import { loadCountsData } from '../data/counts.js';
import { loadUnitData } from '../data/unit-data.js';
import { UserError } from '../errors.js';
import { prepareArea } from '../models/area-prepare.js';
import { prepareCounts } from '../models/counts-prepare.js';
import type { PreparedFit } from '../models/prepared.js';
import { prepareUnit } from '../models/unit-prepare.js';

export async function prepareFit(settings: Settings): Promise<PreparedFit> {
  switch (settings.model.kind) {
    case 'area': {
      const { data, files } = await loadAreaData(settings);
      return prepareArea(settings, data, files);
    }
    case 'unit': {
      const { data, files } = await loadUnitData(settings);
      return prepareUnit(settings, data, files);
    }
    case 'counts': {
      const { data, files } = await loadCountsData(settings);
      return prepareCounts(settings, data, files);
    }
    default:
      throw new UserError('config', `${settings.config_path}: model.kind: "${settings.model.kind}" is not available in this version yet`);
  }
}
