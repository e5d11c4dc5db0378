/** rowdeck's public API: functions and types only. */
export { shuffle, runShuffle, type ShuffleRun } from './engine/shuffle.js';
export type { Manifest, PartRecord } from './engine/manifest.js';
export {
  verify,
  type VerifyOptions,
  type VerifyReport,
  type VerifyCheck,
  type VerifyMismatch,
  type VerifyStatus,
  type VerifyAgainst,
  type VerifyProgress,
  type RecordDifference,
} from './engine/verify.js';
export type { ShuffleOptions, ProgressEvent } from './options.js';
export { RowdeckError, type RowdeckErrorCode, type ErrorDetails } from './errors.js';
export type { InputFormat, BadRecordPolicy } from './io/batch.js';
export { VERSION } from './version.js';
export {
  profile,
  type Profile,
  type ProfileOptions,
  type ProfileProgress,
  type ProfileInput,
  type ProfileClass,
  type ProfileStrata,
  type ProfileWarning,
  type ProfileWarningCode,
} from './engine/profile.js';
export type { ColumnSummary, ColumnType, ValueCount } from './core/stats.js';
export { writeReport, writeProfileReport, REPORT_FILE, type ReportOptions, type ReportResult } from './report/write.js';
export { renderManifestReport, type ManifestReportOptions } from './report/html.js';
export { renderProfileReport, type ProfileReportOptions } from './report/profile-html.js';
