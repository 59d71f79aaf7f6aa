// Importing this module makes proven folds possible (see check-kit.ts): it loads the evaluator and the checks.
import { compare } from '../verify/compare.js';
import { proveFold } from '../verify/prove.js';
import { saveProbeSets } from '../verify/probe-files.js';
import { provideCheckKit } from './check-kit.js';

provideCheckKit({ compare, proveFold, saveProbeSets });
