//! Prints the hex of every example frame of `PROTOCOL.md` (prefix included),
//! as the document shows them: `cargo run -p wahbad-protocol --example protocol_hex`.

mod list;

fn main() {
    for (title, msg) in list::doc_examples() {
        let frame = wahbad_protocol::encode_frame(&msg);
        let json = serde_json::to_string(&msg).expect("examples are finite");
        println!(
            "### {title} ({} bytes)\n\n{json}\n\n```text\n{}\n```\n",
            frame.len(),
            list::hex_lines(&frame)
        );
    }
}
