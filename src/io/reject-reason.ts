/**
 * A refused record's reason as it is kept (rejected.csv, a profile's list of malformed records):
 * the message of the error it would have been, without the advice to pass --on-bad-record, which
 * was followed already (and reads oddly inside the quarantine file).
 */
const POLICY_HINT = /(?:,? or|;) use --on-bad-record \S+ to set [^.]* aside\.$/;

export function rejectReason(message: string): string {
  return message.replace(POLICY_HINT, '.');
}
