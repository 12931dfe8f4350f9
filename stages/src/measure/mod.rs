pub mod maximum;
