//! Reading a program's source (a file, standard input or `-e`) or a stub
//! file, never more than a maximum: a larger input is refused as soon as it
//! is seen to be larger, without reading it whole.

use std::io::Read;

use super::args::Input;

/// A source read whole: its name for messages and its bytes.
pub struct Source {
    /// `FILE`, `<stdin>` or `<-e>`.
    pub name: String,
    pub bytes: Vec<u8>,
}

/// Read the program `input` names, at most `max` bytes.
pub fn read_input(input: &Input, max: usize) -> Result<Source, String> {
    match (&input.eval, input.file.as_deref()) {
        (Some(text), _) => {
            if text.len() > max {
                return Err(too_large("<-e>", max));
            }
            Ok(Source {
                name: "<-e>".to_string(),
                bytes: text.clone().into_bytes(),
            })
        }
        (None, Some("-") | None) => {
            let bytes = read_at_most(std::io::stdin().lock(), "<stdin>", max)?;
            Ok(Source {
                name: "<stdin>".to_string(),
                bytes,
            })
        }
        (None, Some(path)) => Ok(Source {
            name: path.to_string(),
            bytes: read_file(path, max)?,
        }),
    }
}

/// The bytes of the file at `path`, at most `max` of them.
pub fn read_file(path: &str, max: usize) -> Result<Vec<u8>, String> {
    let file = std::fs::File::open(path).map_err(|e| format!("cannot read {path}: {e}"))?;
    // A regular file says its size: refuse it before reading anything.
    if let Ok(meta) = file.metadata() {
        if meta.is_file() && meta.len() > max as u64 {
            return Err(too_large(path, max));
        }
    }
    read_at_most(file, path, max)
}

/// Everything `reader` gives, or an error once it gives more than `max`
/// bytes (so an endless stream stops at `max + 1`).
fn read_at_most(reader: impl Read, name: &str, max: usize) -> Result<Vec<u8>, String> {
    let mut bytes = Vec::new();
    reader
        .take((max as u64).saturating_add(1))
        .read_to_end(&mut bytes)
        .map_err(|e| format!("cannot read {name}: {e}"))?;
    if bytes.len() > max {
        return Err(too_large(name, max));
    }
    Ok(bytes)
}

fn too_large(name: &str, max: usize) -> String {
    format!("{name} is larger than the maximum source size of {max} bytes (see --max-source)")
}
