pub mod survey;
