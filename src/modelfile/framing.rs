//! The framing check of a model file: the Arrow IPC footer, the one record batch and its
//! buffers must lie inside the file before the Arrow reader is let loose on it.

use super::ARROW_MAGIC;

/// Bytes per element of each IPC buffer of our schema, in order: `name` (validity,
/// i32 offsets, UTF-8 bytes), `rows` and `cols` (validity, u64), `values` (validity,
/// i32 offsets) and its items (validity, f64).
const BUFFER_WIDTHS: [u64; 11] = [1, 4, 1, 1, 8, 1, 8, 1, 4, 1, 8];

/// Checks the IPC file framing of a file with our schema before the Arrow reader reads
/// its record batch: the footer, the one record-batch block and its buffers must lie
/// inside the file, aligned, with whole elements, because the reader slices and casts
/// buffers with assertions (it would panic rather than fail on a damaged offset).
/// Layout: Arrow columnar format specification, "IPC File Format".
pub(super) fn check_framing(bytes: &[u8]) -> std::result::Result<(), &'static str> {
    let len = bytes.len();
    let tail = len - ARROW_MAGIC.len() - 4;
    let footer_len = i32::from_le_bytes(bytes[tail..tail + 4].try_into().expect("4 bytes"));
    let footer_len = usize::try_from(footer_len).map_err(|_| "negative footer length")?;
    // The file opens with the magic padded to 8 bytes.
    let footer_start = tail
        .checked_sub(footer_len)
        .filter(|&s| s >= 8)
        .ok_or("footer length beyond the file")?;
    let footer =
        arrow_ipc::root_as_footer(&bytes[footer_start..tail]).map_err(|_| "unreadable footer")?;
    if footer.dictionaries().is_some_and(|d| !d.is_empty()) {
        return Err("unexpected dictionaries");
    }
    let blocks = footer.recordBatches().ok_or("no record batch")?;
    if blocks.len() != 1 {
        return Err("not exactly one record batch");
    }
    let block = blocks.get(0);
    let offset = usize::try_from(block.offset()).map_err(|_| "negative block offset")?;
    let meta_len = usize::try_from(block.metaDataLength()).map_err(|_| "negative length")?;
    let body_len = usize::try_from(block.bodyLength()).map_err(|_| "negative length")?;
    let end = offset
        .checked_add(meta_len)
        .and_then(|e| e.checked_add(body_len))
        .ok_or("block length overflows")?;
    if offset < 8 || meta_len < 8 || end > footer_start {
        return Err("record batch beyond the file");
    }
    // The format aligns every message and body to 8 bytes.
    if offset % 8 != 0 || meta_len % 8 != 0 {
        return Err("misaligned record batch");
    }
    let message = &bytes[offset..offset + meta_len];
    let message = if message[..4] == [0xff; 4] {
        &message[8..]
    } else {
        &message[4..]
    };
    let message = arrow_ipc::root_as_message(message).map_err(|_| "unreadable message")?;
    let batch = message
        .header_as_record_batch()
        .ok_or("message is not a record batch")?;
    if batch.compression().is_some() {
        return Err("unexpected compression");
    }
    let bits = (body_len as u64).saturating_mul(8);
    let rows_ok = |n: i64| u64::try_from(n).is_ok_and(|n| n <= bits.max(64));
    if !rows_ok(batch.length()) {
        return Err("implausible row count");
    }
    for node in batch.nodes().ok_or("no field nodes")?.iter() {
        if !rows_ok(node.length()) || !rows_ok(node.null_count()) {
            return Err("implausible column length");
        }
    }
    let buffers = batch.buffers().ok_or("no buffers")?;
    if buffers.len() != BUFFER_WIDTHS.len() {
        return Err("wrong number of buffers");
    }
    for (buffer, width) in buffers.iter().zip(BUFFER_WIDTHS) {
        let start = u64::try_from(buffer.offset()).map_err(|_| "negative buffer offset")?;
        let size = u64::try_from(buffer.length()).map_err(|_| "negative buffer length")?;
        if start % 8 != 0 || start.checked_add(size).is_none_or(|e| e > body_len as u64) {
            return Err("buffer beyond the record batch");
        }
        if size % width != 0 {
            return Err("buffer of partial elements");
        }
    }
    Ok(())
}
