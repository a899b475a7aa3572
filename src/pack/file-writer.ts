/**
 * Sequential writing of a model file (docs/model-file.md, "Layout"): the header, then each section
 * as it is built — in pieces of any size, its CRC-32 computed as the pieces pass — padded to a
 * multiple of 8 bytes, then the section table and the footer, which the writer knows only at the
 * end. Nothing is written twice and nothing is sought back to, so a section of any length is never
 * one buffer. Writes go out in calls of PACK_WRITE_BUFFER_BYTES through the stage's WritableFile.
 */
import { crc32 } from 'node:zlib';
import { assert, QuernError } from '../errors.ts';
import type { WritableFile } from '../job/fsio.ts';
import { PACK_SECTION_BYTES_MAX, PACK_SECTIONS_MAX, PACK_WRITE_BUFFER_BYTES } from '../limits.ts';
import { alignUp, F, FOOTER_BYTES, HEADER_BYTES, SECTION_ALIGN_BYTES, SECTION_ENTRY_BYTES, sectionName } from './format.ts';

/** A section as written: its table entry. */
export interface WrittenSection {
  kind: number;
  order: number;
  offset: number;
  bytes: number;
  crc32: number;
}

export class ModelFileWriter {
  /** Bytes written so far (gathered ones included). */
  position = 0;
  readonly sections: WrittenSection[] = [];
  private current: WrittenSection | null = null;
  private readonly gathered = Buffer.allocUnsafeSlow(PACK_WRITE_BUFFER_BYTES);
  private gatheredBytes = 0;

  constructor(private readonly file: WritableFile) {}

  /** Writes the 128-byte header; the first thing in the file. */
  async header(bytes: Uint8Array): Promise<void> {
    assert(this.position === 0 && bytes.length === HEADER_BYTES, 'the header comes first and is 128 bytes');
    await this.put(bytes);
  }

  /** Starts a section at the current (aligned) position. */
  begin(kind: number, order: number): void {
    assert(this.current === null && this.position % SECTION_ALIGN_BYTES === 0 && this.position >= HEADER_BYTES, 'sections follow one another, aligned');
    if (this.sections.length >= PACK_SECTIONS_MAX) assert(false, `a model file has at most ${PACK_SECTIONS_MAX} sections`);
    this.current = { kind, order, offset: this.position, bytes: 0, crc32: 0 };
  }

  /** Appends bytes to the current section. Throws QuernError 'limit' past PACK_SECTION_BYTES_MAX. */
  async write(bytes: Uint8Array): Promise<void> {
    const section = this.current;
    assert(section !== null, 'a section is open');
    if (section.bytes + bytes.length > PACK_SECTION_BYTES_MAX) {
      throw new QuernError('limit', `the ${sectionName(section.kind, section.order)} would take over ${PACK_SECTION_BYTES_MAX} bytes, the section limit of the model file`);
    }
    // Nothing to add (and node:zlib's crc32 of an empty array over an empty buffer returns 0, not
    // the running value).
    if (bytes.length === 0) return;
    section.crc32 = crc32(bytes, section.crc32);
    section.bytes += bytes.length;
    await this.put(bytes);
  }

  /** Ends the current section: zero padding to the next multiple of 8. */
  async end(): Promise<void> {
    const section = this.current;
    assert(section !== null, 'a section is open');
    assert(this.position === section.offset + section.bytes, 'a section is its bytes');
    this.sections.push(section);
    this.current = null;
    const padding = alignUp(this.position) - this.position;
    if (padding > 0) await this.put(new Uint8Array(padding));
  }

  /** A whole section at once. */
  async section(kind: number, order: number, bytes: Uint8Array): Promise<void> {
    this.begin(kind, order);
    await this.write(bytes);
    await this.end();
  }

  /** Writes the section table and the footer, and flushes: the file is complete. Returns its size. */
  async finish(): Promise<number> {
    assert(this.current === null, 'no section is open');
    const count = this.sections.length;
    const table = Buffer.alloc(count * SECTION_ENTRY_BYTES);
    this.sections.forEach((section, index) => {
      const entry = index * SECTION_ENTRY_BYTES;
      table.writeUInt32LE(section.kind, entry);
      table.writeUInt32LE(section.order, entry + 4);
      table.writeBigUInt64LE(BigInt(section.offset), entry + 8);
      table.writeBigUInt64LE(BigInt(section.bytes), entry + 16);
      table.writeUInt32LE(section.crc32, entry + 24);
    });
    const tableOffset = this.position;
    const fileBytes = tableOffset + table.length + FOOTER_BYTES;
    const footer = Buffer.alloc(FOOTER_BYTES);
    footer.writeBigUInt64LE(BigInt(tableOffset), F.tableOffset);
    footer.writeUInt32LE(count, F.sectionCount);
    footer.writeUInt32LE(crc32(table), F.tableCrc);
    footer.writeBigUInt64LE(BigInt(fileBytes), F.fileBytes);
    footer.writeUInt32LE(crc32(footer.subarray(0, F.footerCrc)), F.footerCrc);
    await this.put(table);
    await this.put(footer);
    await this.flush();
    assert(this.position === fileBytes, 'the file ends with the footer');
    return fileBytes;
  }

  private async put(bytes: Uint8Array): Promise<void> {
    this.position += bytes.length;
    let from = 0;
    while (from < bytes.length) {
      const room = this.gathered.length - this.gatheredBytes;
      if (this.gatheredBytes === 0 && bytes.length - from >= this.gathered.length) {
        // A large piece goes out as it is, in calls of at most the gathering size.
        const piece = bytes.subarray(from, from + this.gathered.length);
        await this.file.write(piece);
        from += piece.length;
        continue;
      }
      const length = Math.min(room, bytes.length - from);
      this.gathered.set(bytes.subarray(from, from + length), this.gatheredBytes);
      this.gatheredBytes += length;
      from += length;
      if (this.gatheredBytes === this.gathered.length) await this.flush();
    }
  }

  private async flush(): Promise<void> {
    if (this.gatheredBytes === 0) return;
    // The write completes before the buffer is reused (WritableFile.write resolves when it has).
    await this.file.write(this.gathered.subarray(0, this.gatheredBytes));
    this.gatheredBytes = 0;
  }
}
