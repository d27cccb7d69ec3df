//! A WAV-family file built field by field (RIFF, RIFX, RF64, BW64; PCM, float, mu-law,
//! A-law; extensible headers; bext; placeholder sizes), for traps no writer makes on purpose.
//! Shared by the unit tests of `src/decode/wav.rs` and the integration tests.

/// A WAV-family file built field by field, for traps no writer makes on purpose.
pub struct WavBuilder {
    pub magic: &'static [u8; 4],
    pub tag: u16,
    pub channels: u16,
    pub rate: u32,
    pub bits: u16,
    pub block_align: Option<u16>,
    pub valid_bits: Option<u16>,
    pub data_size: Option<u32>,
    pub riff_size: Option<u32>,
    pub bext_time_reference: Option<u64>,
}

impl Default for WavBuilder {
    fn default() -> Self {
        WavBuilder {
            magic: b"RIFF",
            tag: 1,
            channels: 1,
            rate: 48_000,
            bits: 16,
            block_align: None,
            valid_bits: None,
            data_size: None,
            riff_size: None,
            bext_time_reference: None,
        }
    }
}

impl WavBuilder {
    pub fn build(&self, data: &[u8]) -> Vec<u8> {
        let be = self.magic == b"RIFX";
        let u16b = |v: u16| if be { v.to_be_bytes() } else { v.to_le_bytes() };
        let u32b = |v: u32| if be { v.to_be_bytes() } else { v.to_le_bytes() };
        let container = self.bits.div_ceil(8);
        let align = self.block_align.unwrap_or(self.channels * container);
        let mut fmt = Vec::new();
        let extensible = self.valid_bits.is_some();
        fmt.extend(u16b(if extensible { 0xFFFE } else { self.tag }));
        fmt.extend(u16b(self.channels));
        fmt.extend(u32b(self.rate));
        fmt.extend(u32b(self.rate * u32::from(align)));
        fmt.extend(u16b(align));
        fmt.extend(u16b(self.bits));
        if let Some(valid) = self.valid_bits {
            fmt.extend(u16b(22));
            fmt.extend(u16b(valid));
            fmt.extend(u32b(0));
            fmt.extend(u32b(u32::from(self.tag)));
            fmt.extend([
                0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xAA, 0x00, 0x38, 0x9B, 0x71,
            ]);
        }
        let mut body = b"WAVE".to_vec();
        if self.magic == b"RF64" || self.magic == b"BW64" {
            body.extend(b"ds64");
            body.extend(28u32.to_le_bytes());
            body.extend(0u64.to_le_bytes());
            body.extend((data.len() as u64).to_le_bytes());
            body.extend(0u64.to_le_bytes());
            body.extend(0u32.to_le_bytes());
        }
        body.extend(b"fmt ");
        body.extend(u32b(fmt.len() as u32));
        body.extend(&fmt);
        if let Some(reference) = self.bext_time_reference {
            let mut bext = vec![0u8; 602];
            bext[320..330].copy_from_slice(b"2031-04-05");
            bext[330..338].copy_from_slice(b"13:45:10");
            bext[338..342].copy_from_slice(&u32b(reference as u32));
            bext[342..346].copy_from_slice(&u32b((reference >> 32) as u32));
            body.extend(b"bext");
            body.extend(u32b(bext.len() as u32));
            body.extend(bext);
        }
        body.extend(b"data");
        let sixty_four = self.magic == b"RF64" || self.magic == b"BW64";
        let default_size = if sixty_four {
            0xFFFF_FFFF
        } else {
            data.len() as u32
        };
        body.extend(u32b(self.data_size.unwrap_or(default_size)));
        body.extend(data);
        let mut out = self.magic.to_vec();
        let default_riff = if sixty_four {
            0xFFFF_FFFF
        } else {
            body.len() as u32
        };
        out.extend(u32b(self.riff_size.unwrap_or(default_riff)));
        out.extend(body);
        out
    }
}
