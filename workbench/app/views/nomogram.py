import streamlit as st

st.title("nomogram")
