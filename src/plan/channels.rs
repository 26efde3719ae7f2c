//! The `channels:` list: named channels, each an output and an input (numbered from 1 in
//! the YAML, from 0 in [`ChannelSpec`]). Its schema ([`RawChannel`]) and validation; a
//! channel's own `correction:` is read with the plan-wide one ([`super::correction`]).

use super::raw::RawList;
use super::validate::Validator;
use super::ChannelSpec;
use crate::config::{found_scalar, is_channel_name, label, Pos};
use marked_yaml::Spanned;
use serde::de::IgnoredAny;
use serde::Deserialize;

/// Highest output or input channel number (1-based) a plan may name; bounds the buffers a
/// stimulus allocates (64 covers station interfaces; common practice).
pub const MAX_CHANNEL_NUMBER: usize = 64;

/// One item of `channels:` (channel numbers 1-based, as written).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a mapping")]
pub struct RawChannel {
    /// Channel name.
    pub name: Option<Spanned<String>>,
    /// Output channel number, 1-based.
    pub output: Option<Spanned<i128>>,
    /// Input channel number, 1-based.
    pub input: Option<Spanned<i128>>,
    /// Decoded on its own into [`RawPlan::channel_corrections`](super::raw::RawPlan::channel_corrections).
    pub correction: Option<IgnoredAny>,
}

impl Validator {
    /// The typed channels when all are valid, and the channel names when every channel has
    /// a valid unique one (so that checks can be told about names they get wrong even while
    /// a channel has another problem).
    pub(super) fn channels(
        &mut self,
        list: &RawList<RawChannel>,
    ) -> (Option<Vec<ChannelSpec>>, Option<Vec<String>>) {
        let mut out = Vec::new();
        let mut ok = true;
        let mut names_ok = true;
        if list.items.is_empty() {
            self.report(
                list.pos,
                "channels: expected at least one channel, found none".into(),
            );
            return (None, None);
        }
        // (name, where) and (input, channel label, where) seen so far.
        let mut names: Vec<(String, Pos)> = Vec::new();
        let mut inputs: Vec<(usize, String, Pos)> = Vec::new();
        for (i, item) in list.items.iter().enumerate() {
            let Some(sec) = item else {
                ok = false;
                names_ok = false;
                continue;
            };
            let c = &sec.value;
            let fallback_ctx = format!("channel #{}", i + 1);
            let ctx = match &c.name {
                Some(v) if is_channel_name(v) => format!("channel {}", v.as_str()),
                _ => fallback_ctx.clone(),
            };
            let name = self
                .required(sec, &c.name, &fallback_ctx, "name")
                .and_then(|v| {
                    if !is_channel_name(v) {
                        self.report(
                            Pos::of_value(v),
                            format!(
                            "{fallback_ctx}: name: expected lowercase letters, digits, `_` or `-`, \
                             found {}",
                            found_scalar(v)
                        ),
                        );
                        return None;
                    }
                    if let Some((_, first)) = names.iter().find(|(n, _)| n == v.as_str()) {
                        self.report(
                            Pos::of_value(v),
                            format!(
                                "channel {}: expected a unique name, found one already given at \
                             line {} column {}",
                                v.as_str(),
                                first.line,
                                first.col
                            ),
                        );
                        return None;
                    }
                    names.push((v.to_string(), Pos::of_value(v)));
                    Some(v.to_string())
                });
            names_ok &= name.is_some();
            let mut number = |v: &Option<Spanned<i128>>, key: &str| {
                self.required(sec, v, &ctx, key).and_then(|v| {
                    self.int_in_range(v, &label(&ctx, key), 1, MAX_CHANNEL_NUMBER as i128)
                        .map(|n| (n as usize - 1, Pos::of_value(v)))
                })
            };
            let output = number(&c.output, "output");
            let input = number(&c.input, "input");
            if let Some((idx, pos)) = input {
                if let Some((_, other, _)) = inputs.iter().find(|(n, _, _)| *n == idx) {
                    let msg = format!(
                        "{}: expected an input of its own, found input {} already used by {other}",
                        label(&ctx, "input"),
                        idx + 1
                    );
                    self.report(pos, msg);
                    ok = false;
                } else {
                    inputs.push((idx, ctx.clone(), pos));
                }
            }
            match (name, output, input) {
                (Some(name), Some((output, _)), Some((input, _))) => out.push(ChannelSpec {
                    name,
                    output,
                    input,
                    correction: None,
                }),
                _ => ok = false,
            }
        }
        let names = names_ok.then(|| names.into_iter().map(|(n, _)| n).collect());
        (ok.then_some(out), names)
    }
}
